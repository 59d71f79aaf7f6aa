// Integers the evaluator cannot hold exactly. Every value lives in float64 (src/eval/value.ts), whose 53-bit
// significand holds every integer of magnitude up to 2^53 and no longer every one beyond (IEEE 754 binary64).
// Rather than widen the value store, pleat refuses where that rounding could change what it reports: an int64 or
// uint64 model input given with a value beyond 2^53, and an integer model output that reaches 2^53 (a computed
// 2^53 may itself be 2^53 + 1 rounded). Constants inside the model (INT64_MAX as a Slice end and the like) are
// not refused: kernels read them as bounds, where rounding changes nothing.
import { DataType, elementCount, type DataTypeCode, type Tensor } from '../graph/ir.js';

/** 2^53: integers of at most this magnitude are exact in float64. */
export const EXACT_INTEGER_LIMIT = 2 ** 53;
const LIMIT_BIG = 2n ** 53n;

/** One element beyond the limit: its index and its value written out exactly. */
export interface WideValue {
  index: number;
  text: string;
}

/** int64 and uint64: the element types whose values can pass 2^53. */
export function canBeWide(type: DataTypeCode): boolean {
  return type === DataType.INT64 || type === DataType.UINT64;
}

/** The first of n 64-bit integers at dv (signed or not, little- or big-endian) whose magnitude is above 2^53. */
export function firstWideInRaw(dv: DataView, n: number, signed: boolean, little = true): WideValue | undefined {
  for (let i = 0; i < n; i++) {
    const v = signed ? dv.getBigInt64(i * 8, little) : dv.getBigUint64(i * 8, little);
    if (v > LIMIT_BIG || v < -LIMIT_BIG) return { index: i, text: v.toString() };
  }
  return undefined;
}

/** The first int64/uint64 element of a tensor (a .pb input file) whose magnitude is above 2^53, read exactly. */
export function firstWideInTensor(t: Tensor): WideValue | undefined {
  if (!canBeWide(t.dataType)) return undefined;
  const n = elementCount(t.dims);
  const s = t.storage;
  if (s.kind === 'int64_data' || s.kind === 'uint64_data') {
    for (let i = 0; i < Math.min(n, s.values.length); i++) {
      const v = s.values[i]!;
      if (v > LIMIT_BIG || v < -LIMIT_BIG) return { index: i, text: v.toString() };
    }
    return undefined;
  }
  if (s.kind === 'raw' || s.kind === 'external') {
    const dv = new DataView(s.bytes.buffer, s.bytes.byteOffset, s.bytes.byteLength);
    return firstWideInRaw(dv, Math.min(n, Math.floor(s.bytes.byteLength / 8)), t.dataType === DataType.INT64);
  }
  return undefined;
}

/**
 * The first element of float64 values whose magnitude is above 2^53, or with `reached`, at 2^53 or above (for
 * computed values, which may have been rounded onto 2^53).
 */
export function firstWideValue(data: ArrayLike<number>, reached = false): WideValue | undefined {
  for (let i = 0; i < data.length; i++) {
    const a = Math.abs(data[i]!);
    // (as a whole number: String() would print 2^62 as 4611686018427388000)
    if (reached ? a >= EXACT_INTEGER_LIMIT : a > EXACT_INTEGER_LIMIT) return { index: i, text: Number.isInteger(data[i]) ? BigInt(data[i]!).toString() : String(data[i]) };
  }
  return undefined;
}

/** An integer model output's first value at or beyond 2^53 (float64 may have rounded it), else undefined. */
export function wideOutputValue(type: DataTypeCode, data: ArrayLike<number>): WideValue | undefined {
  return canBeWide(type) ? firstWideValue(data, true) : undefined;
}
