// Tensor element codecs: every TensorProto storage form decoded to Float64Array for math, and encoded back
// in the tensor's own type and storage form.
import { DataType, elementCount, rawByteLength, rawBytesOf, type DataTypeCode, type Tensor, type TensorStorage } from './ir.js';
import { PleatError } from '../errors.js';
import { ensureLoaded, markLoaded, peekBytes } from './lazy-bytes.js';
import { slabBytes } from './slab.js';

const NAMES: Record<number, string> = {
  0: 'undefined', 1: 'float32', 2: 'uint8', 3: 'int8', 4: 'uint16', 5: 'int16', 6: 'int32', 7: 'int64',
  8: 'string', 9: 'bool', 10: 'float16', 11: 'float64', 12: 'uint32', 13: 'uint64', 14: 'complex64',
  15: 'complex128', 16: 'bfloat16',
};

export function dataTypeName(code: DataTypeCode): string {
  return NAMES[code] ?? `unknown(${code})`;
}

/** Bytes per element in raw_data, or undefined for types pleat cannot decode numerically. */
export function bytesPerElement(code: DataTypeCode): number | undefined {
  switch (code) {
    case DataType.FLOAT: case DataType.INT32: case DataType.UINT32: return 4;
    case DataType.DOUBLE: case DataType.INT64: case DataType.UINT64: return 8;
    case DataType.FLOAT16: case DataType.BFLOAT16: case DataType.INT16: case DataType.UINT16: return 2;
    case DataType.INT8: case DataType.UINT8: case DataType.BOOL: return 1;
    default: return undefined;
  }
}

export function isFloatType(code: DataTypeCode): boolean {
  return code === DataType.FLOAT || code === DataType.DOUBLE || code === DataType.FLOAT16 || code === DataType.BFLOAT16;
}

export function isKnownDataType(code: DataTypeCode): boolean {
  return code >= 1 && code <= 16;
}

// ---- half precision -----------------------------------------------------------------------------------

const f32 = new Float32Array(1);
const u32 = new Uint32Array(f32.buffer);

export function halfBitsToNumber(h: number): number {
  const sign = h & 0x8000 ? -1 : 1;
  const exp = (h >> 10) & 0x1f;
  const frac = h & 0x3ff;
  if (exp === 0) return sign * frac * 2 ** -24;
  if (exp === 31) return frac ? NaN : sign * Infinity;
  return sign * (1 + frac / 1024) * 2 ** (exp - 15);
}

/** Round-to-nearest-even conversion of a number to IEEE 754 binary16 bits. */
export function numberToHalfBits(v: number): number {
  f32[0] = v; // first round to float32, as every runtime stores from float32
  const x = u32[0]!;
  const sign = (x >>> 16) & 0x8000;
  const exp = (x >>> 23) & 0xff;
  let mant = x & 0x7fffff;
  if (exp === 0xff) return sign | 0x7c00 | (mant ? 0x200 : 0);
  let e = exp - 127 + 15;
  if (e >= 31) return sign | 0x7c00;
  if (e <= 0) {
    if (e < -10) return sign;
    mant |= 0x800000;
    const shift = 14 - e;
    let half = mant >> shift;
    const rem = mant & ((1 << shift) - 1);
    const mid = 1 << (shift - 1);
    if (rem > mid || (rem === mid && (half & 1))) half++;
    return sign | half;
  }
  let half = (e << 10) | (mant >> 13);
  const rem = mant & 0x1fff;
  if (rem > 0x1000 || (rem === 0x1000 && (half & 1))) half++;
  return sign | half; // a carry into the exponent is the correct rounding (up to infinity)
}

export function bfloatBitsToNumber(b: number): number {
  u32[0] = (b & 0xffff) << 16;
  return f32[0]!;
}

export function numberToBfloatBits(v: number): number {
  f32[0] = v;
  const x = u32[0]!;
  if ((x & 0x7f800000) === 0x7f800000 && (x & 0x7fffff)) return ((x >>> 16) | 0x40) & 0xffff;
  const rounded = x + 0x7fff + ((x >>> 16) & 1);
  return (rounded >>> 16) & 0xffff;
}

export const FLOAT16_MAX = 65504;

// ---- decode -------------------------------------------------------------------------------------------

/** A float32 copy of misaligned little-endian bytes (one memcpy into a fresh, aligned buffer). */
function alignedFloat32(bytes: Uint8Array, n: number): Float32Array {
  const copy = new Uint8Array(n * 4);
  copy.set(bytes.subarray(0, n * 4));
  return new Float32Array(copy.buffer, 0, n);
}

function readRaw(bytes: Uint8Array, code: DataTypeCode, n: number, out: Float64Array): void {
  if (code === DataType.FLOAT) {
    // a misaligned view is copied to an aligned buffer first: one memcpy is far cheaper than a DataView read
    // per element on a weight of millions
    const src = (bytes.byteOffset & 3) === 0 ? new Float32Array(bytes.buffer, bytes.byteOffset, n)
      : n < 64 ? undefined : alignedFloat32(bytes, n);
    if (src) out.set(src);
    else { const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength); for (let i = 0; i < n; i++) out[i] = dv.getFloat32(i * 4, true); }
    return;
  }
  // (made only here: the float32 case above, nearly every weight, needs no DataView)
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  switch (code) {
    case DataType.DOUBLE: for (let i = 0; i < n; i++) out[i] = dv.getFloat64(i * 8, true); return;
    case DataType.FLOAT16: for (let i = 0; i < n; i++) out[i] = halfBitsToNumber(dv.getUint16(i * 2, true)); return;
    case DataType.BFLOAT16: for (let i = 0; i < n; i++) out[i] = bfloatBitsToNumber(dv.getUint16(i * 2, true)); return;
    case DataType.INT8: for (let i = 0; i < n; i++) out[i] = dv.getInt8(i); return;
    case DataType.UINT8: case DataType.BOOL: for (let i = 0; i < n; i++) out[i] = dv.getUint8(i); return;
    case DataType.INT16: for (let i = 0; i < n; i++) out[i] = dv.getInt16(i * 2, true); return;
    case DataType.UINT16: for (let i = 0; i < n; i++) out[i] = dv.getUint16(i * 2, true); return;
    case DataType.INT32: for (let i = 0; i < n; i++) out[i] = dv.getInt32(i * 4, true); return;
    case DataType.UINT32: for (let i = 0; i < n; i++) out[i] = dv.getUint32(i * 4, true); return;
    case DataType.INT64: for (let i = 0; i < n; i++) out[i] = Number(dv.getBigInt64(i * 8, true)); return;
    case DataType.UINT64: for (let i = 0; i < n; i++) out[i] = Number(dv.getBigUint64(i * 8, true)); return;
  }
  throw new PleatError('dtype-unsupported', `cannot decode ${dataTypeName(code)} tensor data`);
}

/** Number of elements actually present in a tensor's storage (for the "data shorter than dims" check). */
export function storedElementCount(t: Tensor): number {
  const raw = rawByteLength(t); // a tensor read from a file answers without a view of its bytes
  if (raw >= 0) {
    const b = bytesPerElement(t.dataType);
    return b ? Math.floor(raw / b) : 0;
  }
  const s = t.storage;
  switch (s.kind) {
    case 'raw': case 'external': {
      const b = bytesPerElement(t.dataType);
      return b ? Math.floor(s.bytes.byteLength / b) : 0;
    }
    case 'float_data': case 'int32_data': case 'int64_data': case 'uint64_data': case 'double_data':
      return s.values.length;
    case 'string_data': return s.values.length;
    case 'empty': return 0;
  }
}

/**
 * Decode any numeric tensor to float64 values (int64 beyond 2^53 loses precision; fine for shapes and indices),
 * into `into` when it is given and has exactly the tensor's element count (a reused buffer), else a new array.
 */
export function tensorToFloat64(t: Tensor, into?: Float64Array): Float64Array {
  const n = elementCount(t.dims);
  if (!isKnownDataType(t.dataType)) {
    throw new PleatError('bad-model', `tensor '${t.name}' has unknown data type ${t.dataType}`);
  }
  const have = storedElementCount(t);
  if (have < n) {
    throw new PleatError('bad-model',
      `tensor '${t.name}' holds ${have} elements but its dims [${t.dims.join(',')}] need ${n}`);
  }
  const out = into?.length === n ? into : new Float64Array(n);
  const raw = rawBytesOf(t); // (a tensor read from a file keeps no view for this)
  if (raw) {
    readRaw(peekBytes(raw), t.dataType, n, out); // on-disk bytes are read, not kept
    return out;
  }
  const s = t.storage;
  switch (s.kind) {
    case 'raw': case 'external': break; // (read above)
    case 'float_data': case 'double_data': for (let i = 0; i < n; i++) out[i] = s.values[i]!; break;
    case 'int32_data':
      if (t.dataType === DataType.FLOAT16) for (let i = 0; i < n; i++) out[i] = halfBitsToNumber(s.values[i]! & 0xffff);
      else if (t.dataType === DataType.BFLOAT16) for (let i = 0; i < n; i++) out[i] = bfloatBitsToNumber(s.values[i]!);
      else for (let i = 0; i < n; i++) out[i] = s.values[i]!;
      break;
    case 'int64_data': case 'uint64_data': for (let i = 0; i < n; i++) out[i] = Number(s.values[i]!); break;
    case 'string_data': case 'empty':
      if (n > 0) throw new PleatError('dtype-unsupported', `tensor '${t.name}' of type ${dataTypeName(t.dataType)} has no numeric data`);
  }
  return out;
}

// ---- encode -------------------------------------------------------------------------------------------

function writeRaw(values: ArrayLike<number>, code: DataTypeCode, out: Uint8Array): void {
  const dv = new DataView(out.buffer, out.byteOffset, out.byteLength);
  const n = values.length;
  switch (code) {
    case DataType.FLOAT: for (let i = 0; i < n; i++) dv.setFloat32(i * 4, values[i]!, true); return;
    case DataType.DOUBLE: for (let i = 0; i < n; i++) dv.setFloat64(i * 8, values[i]!, true); return;
    case DataType.FLOAT16: for (let i = 0; i < n; i++) dv.setUint16(i * 2, numberToHalfBits(values[i]!), true); return;
    case DataType.BFLOAT16: for (let i = 0; i < n; i++) dv.setUint16(i * 2, numberToBfloatBits(values[i]!), true); return;
    case DataType.INT8: for (let i = 0; i < n; i++) dv.setInt8(i, values[i]!); return;
    case DataType.UINT8: case DataType.BOOL: for (let i = 0; i < n; i++) dv.setUint8(i, values[i]!); return;
    case DataType.INT16: for (let i = 0; i < n; i++) dv.setInt16(i * 2, values[i]!, true); return;
    case DataType.UINT16: for (let i = 0; i < n; i++) dv.setUint16(i * 2, values[i]!, true); return;
    case DataType.INT32: for (let i = 0; i < n; i++) dv.setInt32(i * 4, values[i]!, true); return;
    case DataType.UINT32: for (let i = 0; i < n; i++) dv.setUint32(i * 4, values[i]!, true); return;
    case DataType.INT64: for (let i = 0; i < n; i++) dv.setBigInt64(i * 8, BigInt(Math.round(values[i]!)), true); return;
    case DataType.UINT64: for (let i = 0; i < n; i++) dv.setBigUint64(i * 8, BigInt(Math.round(values[i]!)), true); return;
  }
  throw new PleatError('dtype-unsupported', `cannot encode ${dataTypeName(code)} tensor data`);
}

/**
 * Encode values into storage of the same form as `like` (raw stays raw, float_data stays float_data, ...).
 * When `reuse` is set and the old raw bytes have the right size they are overwritten in place, which keeps
 * peak memory near the file size when every weight of a large model changes.
 */
export function encodeStorage(values: ArrayLike<number>, code: DataTypeCode, like: TensorStorage, reuse = false): TensorStorage {
  const n = values.length;
  const bpe = bytesPerElement(code);
  if (bpe === undefined) throw new PleatError('dtype-unsupported', `cannot encode ${dataTypeName(code)} tensor data`);
  switch (like.kind) {
    case 'raw': case 'external': {
      const size = n * bpe;
      const bytes = reuse && like.bytes.byteLength === size ? like.bytes : new Uint8Array(size);
      writeRaw(values, code, bytes);
      markLoaded(bytes); // overwritten in memory: the file's old bytes must not be streamed back
      return like.kind === 'raw' ? { kind: 'raw', bytes } : { kind: 'external', entries: like.entries, bytes };
    }
    case 'float_data': return { kind: 'float_data', values: Float32Array.from(values) };
    case 'double_data': return { kind: 'double_data', values: Float64Array.from(values) };
    case 'int32_data': {
      const out = new Int32Array(n);
      if (code === DataType.FLOAT16) for (let i = 0; i < n; i++) out[i] = numberToHalfBits(values[i]!);
      else if (code === DataType.BFLOAT16) for (let i = 0; i < n; i++) out[i] = numberToBfloatBits(values[i]!);
      else for (let i = 0; i < n; i++) out[i] = values[i]!;
      return { kind: 'int32_data', values: out };
    }
    case 'int64_data': {
      const out = new BigInt64Array(n);
      for (let i = 0; i < n; i++) out[i] = BigInt(Math.round(values[i]!));
      return { kind: 'int64_data', values: out };
    }
    case 'uint64_data': {
      const out = new BigUint64Array(n);
      for (let i = 0; i < n; i++) out[i] = BigInt(Math.round(values[i]!));
      return { kind: 'uint64_data', values: out };
    }
    default: {
      const bytes = new Uint8Array(n * bpe);
      writeRaw(values, code, bytes);
      return { kind: 'raw', bytes };
    }
  }
}

/** Build a new raw_data tensor from values (used for tensors pleat creates). */
export function makeTensor(name: string, dims: number[], dataType: DataTypeCode, values: ArrayLike<number>): Tensor {
  const bpe = bytesPerElement(dataType);
  if (bpe === undefined) throw new PleatError('dtype-unsupported', `cannot encode ${dataTypeName(dataType)} tensor data`);
  // (new memory: no part of a file, so nothing for markLoaded to do, as encodeStorage would do it)
  const bytes = slabBytes(values.length * bpe, 8); // aligned for any element type (see slab.ts)
  writeRaw(values, dataType, bytes);
  return { name, dims: [...dims], dataType, storage: { kind: 'raw', bytes }, docString: '', extra: [] };
}

/** A raw or external tensor's bytes, read from the file first if they were left unread. */
export function tensorBytes(t: Tensor): Uint8Array {
  const s = t.storage;
  if (s.kind !== 'raw' && s.kind !== 'external') throw new PleatError('dtype-unsupported', `tensor '${t.name}' is not stored as raw bytes`);
  ensureLoaded(s.bytes);
  return s.bytes;
}

/** Bytes a tensor's data occupies (inline or external). */
export function tensorByteSize(t: Tensor): number {
  const raw = rawByteLength(t);
  if (raw >= 0) return raw;
  const s = t.storage;
  switch (s.kind) {
    case 'raw': case 'external': return s.bytes.byteLength;
    case 'float_data': case 'int32_data': return s.values.length * 4;
    case 'int64_data': case 'uint64_data': case 'double_data': return s.values.length * 8;
    case 'string_data': return s.values.reduce((a, b) => a + b.byteLength, 0);
    case 'empty': return 0;
  }
}

/** Round values to what the storage type can hold (for proofs that must see the stored weights). */
export function roundToStorage(values: Float64Array, code: DataTypeCode): Float64Array {
  const out = new Float64Array(values.length);
  switch (code) {
    case DataType.FLOAT: out.set(Float32Array.from(values)); return out;
    case DataType.FLOAT16: for (let i = 0; i < values.length; i++) out[i] = halfBitsToNumber(numberToHalfBits(values[i]!)); return out;
    case DataType.BFLOAT16: for (let i = 0; i < values.length; i++) out[i] = bfloatBitsToNumber(numberToBfloatBits(values[i]!)); return out;
    default: out.set(values); return out;
  }
}
