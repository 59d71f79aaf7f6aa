// Shared arithmetic of the quantized operators (ONNX QuantizeLinear/DequantizeLinear docs): the integer range
// of each quantized element type, round half to even, saturation, and the index of the scale/zero point that
// applies to an element (per tensor, per axis, or per block along the axis).
import { DataType, type DataTypeCode } from '../graph/ir.js';

/** ONNX INT4/UINT4 codes (opset 21); held unpacked, one number per element. */
export const UINT4 = 21;
export const INT4 = 22;

const RANGES: Record<number, [number, number]> = {
  [DataType.UINT8]: [0, 255],
  [DataType.INT8]: [-128, 127],
  [DataType.UINT16]: [0, 65535],
  [DataType.INT16]: [-32768, 32767],
  [DataType.INT32]: [-2147483648, 2147483647],
  [UINT4]: [0, 15],
  [INT4]: [-8, 7],
};

/** [min, max] of a quantized integer type, or undefined when the type is not one. */
export function intRange(type: DataTypeCode): [number, number] | undefined {
  return RANGES[type];
}

/** Round to the nearest integer, ties to the even one (IEEE roundTiesToEven, numpy rint). */
export function roundHalfEven(x: number): number {
  const r = Math.round(x); // ties go up here
  return r - x === 0.5 && r % 2 !== 0 ? r - 1 : r;
}

/** Clamp into [lo, hi] (NaN becomes lo, as no integer represents it; onnxruntime gives the same for uint8). */
export function saturate(x: number, lo: number, hi: number): number {
  return x > hi ? hi : x >= lo ? x : lo;
}

/**
 * For each element of a tensor of dims `dims`, the flat index of its scale/zero point: 0 for a scalar (or
 * one-element) scale, the index along `axis` for a 1-D per-axis scale, and with blockSize > 0 the scale
 * tensor has x's rank and its `axis` dimension is ceil(dims[axis] / blockSize).
 */
export function scaleIndexer(dims: readonly number[], scaleDims: readonly number[], axis: number, blockSize: number): (i: number) => number {
  const scaleCount = scaleDims.reduce((a, b) => a * b, 1);
  if (blockSize <= 0 && scaleCount === 1 && scaleDims.length <= 1) return () => 0;
  let inner = 1;
  for (let k = axis + 1; k < dims.length; k++) inner *= dims[k]!;
  const len = dims[axis]!;
  if (blockSize <= 0) return (i) => Math.floor(i / inner) % len;
  const blocks = scaleDims[axis]!;
  return (i) => {
    const outer = Math.floor(i / (inner * len));
    const a = Math.floor(i / inner) % len;
    return (outer * blocks + Math.floor(a / blockSize)) * inner + (i % inner);
  };
}

/** Minimal value shape used below (kept structural so this module stays free of kernel imports). */
interface Vals { type: number; dims: number[]; data: ArrayLike<number> }

/**
 * x - zero point as a float64 tensor (type FLOAT so the float kernels accept it): the zero point is a scalar
 * or, when `axis` is given, one value per index along that axis. Integer products summed in float64 stay exact
 * far beyond any real layer (|sum| < 2^53).
 */
export function centered(x: Vals, zero: Vals | undefined, axis?: number): { type: number; dims: number[]; data: Float64Array } {
  const out = Float64Array.from(x.data);
  if (zero && zero.data.length > 0) {
    if (zero.data.length === 1) {
      const z = zero.data[0]!;
      if (z !== 0) for (let i = 0; i < out.length; i++) out[i] -= z;
    } else {
      const at = scaleIndexer(x.dims, zero.dims, axis ?? 0, 0);
      for (let i = 0; i < out.length; i++) out[i] -= zero.data[at(i)]!;
    }
  }
  return { type: DataType.FLOAT, dims: [...x.dims], data: out };
}

/**
 * Requantize int32 accumulators in place: y = saturate(round_half_even(acc * multiplier[k]) + zero[k]) where k
 * is `at(i)`. The multiplier is (in_scale * w_scale / out_scale) computed in float32 and applied in float32, as
 * onnxruntime does (the standard's scales are float32 tensors).
 */
export function requantize(acc: Float64Array, multiplier: Float32Array, zero: ArrayLike<number> | undefined, at: (i: number) => number, type: DataTypeCode): void {
  const [lo, hi] = intRange(type)!;
  for (let i = 0; i < acc.length; i++) {
    const k = at(i);
    const v = Math.fround(Math.fround(acc[i]!) * multiplier[k]!);
    acc[i] = saturate(roundHalfEven(v) + (zero ? zero[zero.length === 1 ? 0 : k]! : 0), lo, hi);
  }
}

/** Per-element multipliers fround(fround(a * b) / y) over the broadcast of scalar-or-vector scales. */
export function multipliers(a: ArrayLike<number>, b: ArrayLike<number>, y: ArrayLike<number>): Float32Array {
  const n = Math.max(a.length, b.length, y.length);
  const out = new Float32Array(n);
  for (let k = 0; k < n; k++) {
    const av = a[a.length === 1 ? 0 : k]!, bv = b[b.length === 1 ? 0 : k]!, yv = y[y.length === 1 ? 0 : k]!;
    out[k] = Math.fround(Math.fround(Math.fround(av) * Math.fround(bv)) / Math.fround(yv));
  }
  return out;
}
