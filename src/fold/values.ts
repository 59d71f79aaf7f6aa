// Reading and writing the big weights. Float32 raw data (the common case) is read through a Float32Array view
// and scaled where it lies, each product computed in float64 and rounded once on store, with no float64 copy
// of the whole tensor; other types and storage forms go through the general codecs in src/onnx/tensor.ts.
import { DataType, elementCount, type Tensor } from '../graph/ir.js';
import { tensorToFloat64 } from '../onnx/tensor.js';
import { setTensorValues, touch } from '../graph/edit.js';
import { ensureLoaded } from '../onnx/sparse-read.js';
import { scaleRawFloat32, scaleWeights, type WeightView } from './weights.js';

function rawFloat32(t: Tensor): Uint8Array | undefined {
  const s = t.storage;
  if (t.dataType !== DataType.FLOAT || (s.kind !== 'raw' && s.kind !== 'external')) return undefined;
  return s.bytes.byteLength === elementCount(t.dims) * 4 ? s.bytes : undefined;
}

/** A Float32Array over raw bytes: a view when aligned, else an aligned copy (Buffer.slice would only be a view). */
function float32Of(bytes: Uint8Array): { f32: Float32Array; copied: boolean } {
  ensureLoaded(bytes); // large payloads may still be on disk (see src/onnx/sparse-read.ts)
  const n = bytes.byteLength / 4;
  if ((bytes.byteOffset & 3) === 0) return { f32: new Float32Array(bytes.buffer, bytes.byteOffset, n), copied: false };
  const aligned = new Uint8Array(bytes.byteLength);
  aligned.set(bytes);
  return { f32: new Float32Array(aligned.buffer, 0, n), copied: true };
}

/** A tensor's values for reading: float32 data as-is (exact in float64 arithmetic), anything else decoded to float64. */
export function weightSource(t: Tensor): Float32Array | Float64Array {
  const bytes = rawFloat32(t);
  return bytes ? float32Of(bytes).f32 : tensorToFloat64(t);
}

/**
 * The largest |W'| a channel scaling would give, without copying float32 raw data (the storage range check).
 */
export function scaledMaxAbs(t: Tensor, v: WeightView, map: Int32Array, scale: Float64Array): number {
  const bytes = rawFloat32(t);
  if (bytes) {
    ensureLoaded(bytes);
    return scaleRawFloat32(bytes, v, map, scale, false);
  }
  return scaleWeights(tensorToFloat64(t), v, map, scale);
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

/** Scale a tensor's elements by channel, stored back in its own type; in place for float32 raw data when allowed. */
export function scaleTensor(t: Tensor, v: WeightView, map: Int32Array, scale: Float64Array, inPlace: boolean): void {
  const bytes = rawFloat32(t);
  if (bytes && inPlace) {
    ensureLoaded(bytes);
    scaleRawFloat32(bytes, v, map, scale, true);
    touch(t);
    return;
  }
  const values = tensorToFloat64(t);
  scaleWeights(values, v, map, scale, values);
  setTensorValues(t, values, { inPlace });
}
