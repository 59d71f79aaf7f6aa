// Small helpers shared by the elementwise, shape and reduction kernels: output allocation by element type and
// precision, integer wrapping, axis normalisation, reading shape-like inputs, and the one-line errors.
import { DataType, elementCount, type DataTypeCode, type Tensor } from '../../graph/ir.js';
import { badModel, unsupported } from '../attrs.js';
import { dataTypeName, isFloatType, tensorToFloat64 } from '../../graph/tensor.js';
import { takeFloat32, takeFloat64 } from '../pool.js';
import type { KernelContext, NumArray, Value } from '../value.js';

export { isFloatType, badModel, unsupported };

/**
 * Storage for `n` elements of `type`: floats follow ctx.precision, integers and bools are always Float64Array.
 * Large buffers come from the evaluator's pool (fresh memory is slow to fault in), zeroed unless `zero` is false.
 */
export function alloc(type: DataTypeCode, n: number, ctx: Pick<KernelContext, 'precision'>, zero = true): NumArray {
  return isFloatType(type) && ctx.precision === 'float32' ? takeFloat32(n, zero) : takeFloat64(n, zero);
}

/**
 * Storage for an elementwise result of the same type and length as input i: input i's own array when the
 * evaluator says nothing else can read it (see KernelContext.reusable), otherwise a pooled buffer.
 */
export function allocLike(inputs: Array<Value | undefined>, i: number, ctx: KernelContext, zero = true): NumArray {
  const x = inputs[i]!;
  const want32 = isFloatType(x.type) && ctx.precision === 'float32';
  if (ctx.reusable?.(i) && (want32 ? x.data instanceof Float32Array : x.data instanceof Float64Array)) return x.data;
  return alloc(x.type, x.data.length, ctx, zero);
}

/** A value with new dims sharing the same data (Reshape, Flatten, Squeeze, Identity...). */
export function reshaped(v: Value, dims: number[]): Value {
  return { type: v.type, dims, data: v.data };
}

/** A required input, or a one-line error naming the node. */
export function need(inputs: Array<Value | undefined>, i: number, ctx: KernelContext): Value {
  const v = inputs[i];
  if (!v) throw badModel(ctx, `required input ${i} is missing`);
  return v;
}

/** Map a possibly negative axis into [0, rank). */
export function normAxis(axis: number, rank: number, ctx: KernelContext): number {
  const a = axis < 0 ? axis + rank : axis;
  if (a < 0 || a >= rank || !Number.isInteger(a)) throw badModel(ctx, `axis ${axis} is out of range for rank ${rank}`);
  return a;
}

/** The elements of a small integer tensor (shapes, axes, indices) as plain numbers. */
export function intList(v: Value): number[] {
  return Array.from(v.data, (x) => Math.trunc(x));
}

export function isIntegerType(type: DataTypeCode): boolean {
  return !isFloatType(type) && type !== DataType.BOOL;
}

/** Wrap an integer result into the range of its ONNX type (two's complement, as C arithmetic does). */
export function wrapInt(type: DataTypeCode, x: number): number {
  switch (type) {
    case DataType.INT8: return (x << 24) >> 24;
    case DataType.UINT8: return x & 0xff;
    case DataType.INT16: return (x << 16) >> 16;
    case DataType.UINT16: return x & 0xffff;
    case DataType.INT32: return x | 0;
    case DataType.UINT32: return x >>> 0;
    default: return x; // int64/uint64 stay exact below 2^53, which covers shapes, indices and counts
  }
}

/** Wrap every element in place when the type is a narrow integer type. */
export function wrapAll(type: DataTypeCode, data: NumArray): void {
  if (!isIntegerType(type) || type === DataType.INT64 || type === DataType.UINT64) return;
  for (let i = 0; i < data.length; i++) data[i] = wrapInt(type, data[i]!);
}

export function stridesOf(dims: readonly number[]): number[] {
  const s = new Array<number>(dims.length);
  let acc = 1;
  for (let i = dims.length - 1; i >= 0; i--) { s[i] = acc; acc *= dims[i]!; }
  return s;
}

/**
 * For GatherElements and ScatterElements: the flat offset in `data` that element i of `indices` addresses (i's own
 * coordinates, with its `axis` coordinate replaced by indices[i]; negative indices count from the end). An index
 * out of range is a bad model naming it.
 */
export function elementOffsets(dataDims: readonly number[], indices: Value, axis: number, ctx: KernelContext): Float64Array {
  const rank = dataDims.length;
  const len = dataDims[axis]!;
  const ds = stridesOf(dataDims), is = stridesOf(indices.dims);
  const n = elementCount(indices.dims);
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    let off = 0, rem = i;
    for (let d = 0; d < rank; d++) {
      const c = Math.floor(rem / is[d]!);
      rem -= c * is[d]!;
      if (d !== axis) off += c * ds[d]!;
    }
    let idx = indices.data[i]!;
    if (idx < 0) idx += len;
    if (!(idx >= 0 && idx < len)) throw badModel(ctx, `index ${indices.data[i]} is out of range for axis ${axis} of length ${len}`);
    out[i] = off + idx * ds[axis]!;
  }
  return out;
}

/** A constant tensor (Constant/ConstantOfShape attributes) as a runtime value. */
export function tensorValue(t: Tensor, ctx: KernelContext): Value {
  if (t.dataType === DataType.STRING) throw unsupported(ctx, `a ${dataTypeName(t.dataType)} tensor`);
  const f64 = tensorToFloat64(t);
  const data = alloc(t.dataType, f64.length, ctx);
  data.set(f64);
  return { type: t.dataType, dims: [...t.dims], data };
}

export { elementCount, DataType };
