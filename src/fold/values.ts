// Reading and writing the big weights. Float32 raw data (the common case) is read through a Float32Array view
// and scaled where it lies, each product computed in float64 and rounded once on store, with no float64 copy
// of the whole tensor; other types and storage forms go through the general codecs in src/graph/tensor.ts.
import { DataType, elementCount, rawBytesOf, type Tensor, type TensorStorage } from '../graph/ir.js';
import { tensorToFloat64 } from '../graph/tensor.js';
import { setTensorValues, touch } from '../graph/edit.js';
import { deferTransform, ensureLoaded, isOnDisk, peekBytes, scanView } from '../onnx/sparse-read.js';
import { scaleRawFloat32, scaleWeights, type ChannelMap } from './weights.js';
import { scaleRunsSimd, simdScratch } from './scale-simd.js';

function rawFloat32(t: Tensor): Uint8Array | undefined {
  if (t.dataType !== DataType.FLOAT) return undefined;
  const bytes = rawBytesOf(t); // (a tensor read from a file keeps no view for this: audit reads every weight once)
  return bytes && bytes.byteLength === elementCount(t.dims) * 4 ? bytes : undefined;
}

/** A Float32Array over raw bytes: a view when aligned, else an aligned copy (Buffer.slice would only be a view). */
function float32Of(view: Uint8Array): { f32: Float32Array; copied: boolean } {
  // large payloads may still be on disk (see src/onnx/sparse-read.ts): read for this use, not kept in memory
  const bytes = peekBytes(view);
  const n = bytes.byteLength / 4;
  if ((bytes.byteOffset & 3) === 0) return { f32: new Float32Array(bytes.buffer, bytes.byteOffset, n), copied: false };
  const aligned = new Uint8Array(bytes.byteLength);
  aligned.set(bytes);
  return { f32: new Float32Array(aligned.buffer, 0, n), copied: true };
}

// A four-byte window for reading one unaligned float32 (little-endian, as ONNX raw data is stored).
const oneF32 = new Float32Array(1);
const oneBytes = new Uint8Array(oneF32.buffer);
const littleEndian = new Uint8Array(Uint16Array.of(1).buffer)[0] === 1;

/** Up to this many elements, an unaligned float32 vector is read element by element into float64. */
const SMALL = 64;

/**
 * Small unaligned float32 data (a norm's statistics, a bias) read into float64 directly: one small array instead
 * of an aligned copy and a view over it. The same values (float32 to float64 is exact).
 */
function smallFloat32(bytes: Uint8Array): Float64Array {
  const n = bytes.byteLength >> 2;
  const out = new Float64Array(n);
  for (let i = 0, k = 0; i < n; i++, k += 4) {
    if (littleEndian) { oneBytes[0] = bytes[k]!; oneBytes[1] = bytes[k + 1]!; oneBytes[2] = bytes[k + 2]!; oneBytes[3] = bytes[k + 3]!; }
    else { oneBytes[3] = bytes[k]!; oneBytes[2] = bytes[k + 1]!; oneBytes[1] = bytes[k + 2]!; oneBytes[0] = bytes[k + 3]!; }
    out[i] = oneF32[0]!;
  }
  return out;
}

/** A tensor's values for reading: float32 data as-is (exact in float64 arithmetic), anything else decoded to float64. */
export function weightSource(t: Tensor): Float32Array | Float64Array {
  const bytes = rawFloat32(t);
  if (!bytes) return tensorToFloat64(t);
  if (bytes.byteLength <= SMALL * 4 && (bytes.byteOffset & 3) !== 0) return smallFloat32(peekBytes(bytes));
  return float32Of(bytes).f32;
}

/**
 * The largest |W'| a channel scaling would give, without copying float32 raw data (the storage range check).
 */
export function scaledMaxAbs(t: Tensor, map: ChannelMap, scale: Float64Array): number {
  const bytes = rawFloat32(t);
  if (bytes) {
    // one streaming look at weights still on disk: they need not be loaded just to check the range
    let max = 0;
    scanView(bytes, 4, (block, offset) => {
      const m = scaleFloat32Block(block, offset / 4, map, scale, false);
      max = Number.isNaN(m) || Number.isNaN(max) ? NaN : Math.max(max, m);
    });
    return max;
  }
  return scaleWeights(tensorToFloat64(t), map, scale);
}

/**
 * Whether the storage range check of a channel scaling can ride on the scaling itself: float32 raw weights still
 * on disk, which a fold written to a file scales as the writer streams them out. Checking them first would read
 * the weights twice; instead the scaling checks every block and a failure makes the fold job start again with
 * the check made up front (see jobs/fold.ts), so the result is the same either way.
 */
export function rangeCheckCanWait(t: Tensor): boolean {
  const bytes = rawFloat32(t);
  return !!bytes && isOnDisk(bytes);
}

/** Thrown by a scaling whose range check was put off (see rangeCheckCanWait) when the result does not fit. */
export class LateRangeCheckFailed extends Error {
  constructor(readonly tensor: string) {
    super(`scaled weight ${tensor} does not fit its storage type`);
  }
}

/** Receives the largest |result| of a scaling (checks a range check that was put off). */
export type ScaleGuard = (maxAbs: number) => void;

/**
 * Scale (or, with write=false, only measure) float32 little-endian elements of a block that starts at element
 * `first` of the weight. Returns the largest |result|.
 */
export function scaleFloat32Block(block: Uint8Array, first: number, map: ChannelMap, scale: Float64Array, write: boolean): number {
  const n = block.byteLength >> 2;
  const unit = map.unit;
  let max = 0, nan = false;
  if ((block.byteOffset & 3) === 0) {
    // aligned (always so for the streaming buffers): a Float32Array is several times faster than a DataView
    const f = new Float32Array(block.buffer, block.byteOffset, n);
    if (unit >= 64) {
      // long channel runs (Conv, ConvTranspose, Gemm rows): four weights at a time (src/fold/scale-simd.ts)
      const fast = scaleRunsSimd(f, (visit) => {
        for (let j = 0; j < n;) {
          const e = Math.floor((first + j) / unit);
          const stop = Math.min(n, (e + 1) * unit - first);
          visit(j, stop - j, scale[map.of[e]!]!);
          j = stop;
        }
      }, write);
      if (fast !== undefined) return fast;
    }
    for (let j = 0; j < n;) {
      const e = Math.floor((first + j) / unit);
      const s = scale[map.of[e]!]!;
      const stop = Math.min(n, (e + 1) * unit - first); // the rest of this channel run within the block
      if (write) {
        for (; j < stop; j++) {
          const r = f[j]! * s;
          f[j] = r;
          const m = Math.abs(r);
          if (m > max) max = m;
          else if (m !== m) nan = true;
        }
      } else {
        for (; j < stop; j++) {
          const m = Math.abs(f[j]! * s);
          if (m > max) max = m;
          else if (m !== m) nan = true;
        }
      }
    }
    return nan ? NaN : max;
  }
  if (unit >= 64) return scaleUnaligned(block, first, map, scale, write);
  const dv = new DataView(block.buffer, block.byteOffset, block.byteLength);
  for (let j = 0; j < n;) {
    const e = Math.floor((first + j) / unit);
    const s = scale[map.of[e]!]!;
    const stop = Math.min(n, (e + 1) * unit - first);
    for (; j < stop; j++) {
      const r = dv.getFloat32(j * 4, true) * s;
      const m = Math.abs(r);
      if (m > max) max = m;
      else if (m !== m) nan = true;
      if (write) dv.setFloat32(j * 4, r, true);
    }
  }
  return nan ? NaN : max;
}

/** Bytes of an unaligned block scaled at a time through an aligned copy. */
const ALIGNED_CHUNK = 1 << 20;
let alignedChunk: Uint8Array | undefined;

/**
 * scaleFloat32Block for a block that does not start on a multiple of four bytes (the part of a weight read with
 * its message header lies where the file put it): chunk by chunk through an aligned copy, so the SIMD kernel
 * scales it too (each product stands alone: the same bytes and the same largest |product| as in place).
 */
function scaleUnaligned(block: Uint8Array, first: number, map: ChannelMap, scale: Float64Array, write: boolean): number {
  alignedChunk ??= new Uint8Array(ALIGNED_CHUNK);
  let max = 0, nan = false;
  for (let at = 0; at < block.byteLength; at += ALIGNED_CHUNK) {
    const part = block.subarray(at, Math.min(block.byteLength, at + ALIGNED_CHUNK));
    const copy = alignedChunk.subarray(0, part.byteLength);
    copy.set(part);
    const m = scaleFloat32Block(copy, first + at / 4, map, scale, write);
    if (write) part.set(copy);
    if (m !== m) nan = true;
    else if (m > max) max = m;
  }
  return nan ? NaN : max;
}

/** A tensor's values in float64. */
export function decodeValues(t: Tensor): Float64Array {
  const bytes = rawFloat32(t);
  if (!bytes) return tensorToFloat64(t);
  const out = new Float64Array(bytes.byteLength / 4);
  out.set(float32Of(bytes).f32);
  return out;
}

/** Store values in the tensor's own type and storage form (in place when allowed and the size is unchanged). */
export function storeValues(t: Tensor, values: Float64Array, dims: number[], inPlace: boolean): void {
  setTensorValues(t, values, { dims, inPlace });
}

// A proven fold scales a copy of each weight for its proof, and once proven drops it and scales the weight where
// it lies (src/fold/fold.ts): the copies of a large model come one after another, each as large as the last. A
// fresh buffer per weight is faulted in page by page (it cost more than reading the weight into it), so the last
// copy's buffer is taken again for the next one of its size once its tensor no longer holds it.
let lastCopy: { bytes: Uint8Array; tensor: Tensor } | undefined;

function copyBuffer(length: number): Uint8Array {
  const last = lastCopy;
  if (last && last.bytes.byteLength === length) {
    const s = last.tensor.storage;
    const held = (s.kind === 'raw' || s.kind === 'external') && s.bytes.buffer === last.bytes.buffer;
    if (!held) return last.bytes;
  }
  return new Uint8Array(length);
}

/**
 * Scale a tensor's elements by channel, stored back in its own type; in place for float32 raw data when allowed.
 * `guard` sees the largest |result| (of each streamed block, for weights scaled on their way to the output).
 */
export function scaleTensor(t: Tensor, map: ChannelMap, scale: Float64Array, inPlace: boolean, guard?: ScaleGuard): void {
  const bytes = rawFloat32(t);
  if (bytes && inPlace) {
    // Weights still on disk are scaled as the writer streams them out; the rest is scaled where it lies.
    const change = (block: Uint8Array, offset: number) => {
      const m = scaleFloat32Block(block, offset / 4, map, scale, true);
      guard?.(m);
    };
    if (!deferTransform(bytes, 4, change, simdScratch)) {
      ensureLoaded(bytes);
      const m = scaleRawFloat32(bytes, map, scale, true); // (not inside guard?.(): that would skip it)
      guard?.(m);
    }
    // a new storage object over the same bytes: values decoded from the old one (the evaluator keeps small decoded
    // tensors by storage object) must not be taken for the scaled ones
    t.storage = { ...t.storage };
    touch(t);
    return;
  }
  if (bytes) {
    // a scaled copy in the tensor's own float32 bytes: each product in float64, rounded once on store, as above
    const copy = copyBuffer(bytes.byteLength);
    const got = peekBytes(bytes, copy); // read straight into the copy when the bytes are on disk
    if (got !== copy) copy.set(got);
    const m = scaleFloat32Block(copy, 0, map, scale, true); // (not inside guard?.(): that would skip it)
    guard?.(m);
    const s = t.storage as Extract<TensorStorage, { kind: 'raw' | 'external' }>;
    t.storage = s.kind === 'raw' ? { kind: 'raw', bytes: copy } : { kind: 'external', entries: s.entries, bytes: copy };
    touch(t);
    lastCopy = { bytes: copy, tensor: t };
    return;
  }
  const values = tensorToFloat64(t);
  const m = scaleWeights(values, map, scale, values);
  guard?.(m);
  setTensorValues(t, values, { inPlace });
}
