// Multidirectional (numpy-style) broadcasting, shared by every kernel that combines tensors of different shapes.
//
// API (all shapes are plain number[] dims; data is any NumArray, i.e. Float64Array | Float32Array):
//   broadcastShape(shapes, where)                      -> number[]   output dims; PleatError('bad-model') naming `where` on mismatch
//   broadcastStrides(dims, outDims)                    -> number[]   per output axis, the element stride into the input (0 on broadcast axes)
//   broadcastBinary(a, aDims, b, bDims, fn, out, outDims) -> void    out[i] = fn(a[..], b[..]); `out` has elementCount(outDims) slots
//   broadcastNary(inputs, fn, out, outDims)            -> void       out[i] = fn(vals) where vals[k] is input k's element (vals reused)
//   broadcastIndex(dims, outDims)                      -> Int32Array for each output element, the flat index into the input
//   expandTo(data, dims, out, outDims)                 -> void       materialise `data` broadcast to outDims
// `outDims` must be the result of broadcastShape over the inputs (callers may add leading axes, e.g. Expand).
// Hot loops run over the innermost output axis with constant input strides, with fast paths for equal shapes
// and scalars, so the common cases cost one typed-array pass.
import { PleatError } from '../errors.js';
import { elementCount } from '../graph/ir.js';
import type { NumArray } from './value.js';

/** Output shape of broadcasting `shapes` together. `where` names the node for the error message. */
export function broadcastShape(shapes: ReadonlyArray<readonly number[]>, where: string): number[] {
  let rank = 0;
  for (const s of shapes) rank = Math.max(rank, s.length);
  const out = new Array<number>(rank).fill(1);
  for (const s of shapes) {
    const off = rank - s.length;
    for (let i = 0; i < s.length; i++) {
      const d = s[i]!, o = out[off + i]!;
      if (d === o || d === 1) continue;
      if (o === 1) { out[off + i] = d; continue; }
      throw new PleatError('bad-model',
        `${where}: shapes ${shapes.map((x) => `[${x.join(',')}]`).join(' and ')} do not broadcast (axis ${off + i}: ${o} vs ${d})`);
    }
  }
  return out;
}

/** Element strides into an input of shape `dims` for each axis of `outDims` (right-aligned; 0 where broadcast). */
export function broadcastStrides(dims: readonly number[], outDims: readonly number[]): number[] {
  const rank = outDims.length;
  const st = new Array<number>(rank).fill(0);
  let s = 1;
  for (let i = dims.length - 1; i >= 0; i--) {
    const ax = rank - dims.length + i;
    st[ax] = dims[i] === 1 && outDims[ax] !== 1 ? 0 : s;
    s *= dims[i]!;
  }
  return st;
}

function sameDims(a: readonly number[], b: readonly number[]): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

/** For each output element (row-major), the flat index of the input element it reads. */
export function broadcastIndex(dims: readonly number[], outDims: readonly number[]): Int32Array {
  const n = elementCount(outDims);
  const idx = new Int32Array(n);
  const rank = outDims.length;
  if (rank === 0) return idx;
  const st = broadcastStrides(dims, outDims);
  const inner = outDims[rank - 1]!, sIn = st[rank - 1]!;
  const counter = new Array<number>(rank).fill(0);
  let base = 0;
  for (let o = 0; o < n; o += inner) {
    for (let j = 0; j < inner; j++) idx[o + j] = base + j * sIn;
    // advance the outer counter (axes rank-2 .. 0)
    for (let ax = rank - 2; ax >= 0; ax--) {
      counter[ax]!++;
      base += st[ax]!;
      if (counter[ax]! < outDims[ax]!) break;
      base -= st[ax]! * counter[ax]!;
      counter[ax] = 0;
    }
  }
  return idx;
}

/** out[i] = fn(a-element, b-element) over the broadcast of a and b to outDims. */
export function broadcastBinary(
  a: NumArray, aDims: readonly number[], b: NumArray, bDims: readonly number[],
  fn: (x: number, y: number) => number, out: NumArray, outDims: readonly number[],
): void {
  const n = elementCount(outDims);
  if (n === 0) return;
  if (sameDims(aDims, outDims) && sameDims(bDims, outDims)) {
    for (let i = 0; i < n; i++) out[i] = fn(a[i]!, b[i]!);
    return;
  }
  if (b.length === 1 && sameDims(aDims, outDims)) {
    const y = b[0]!;
    for (let i = 0; i < n; i++) out[i] = fn(a[i]!, y);
    return;
  }
  if (a.length === 1 && sameDims(bDims, outDims)) {
    const x = a[0]!;
    for (let i = 0; i < n; i++) out[i] = fn(x, b[i]!);
    return;
  }
  const rank = outDims.length;
  const sa = broadcastStrides(aDims, outDims), sb = broadcastStrides(bDims, outDims);
  const inner = outDims[rank - 1]!, ia = sa[rank - 1]!, ib = sb[rank - 1]!;
  const counter = new Array<number>(rank).fill(0);
  let pa = 0, pb = 0;
  for (let o = 0; o < n; o += inner) {
    if (ia === 1 && ib === 1) for (let j = 0; j < inner; j++) out[o + j] = fn(a[pa + j]!, b[pb + j]!);
    else if (ia === 1 && ib === 0) { const y = b[pb]!; for (let j = 0; j < inner; j++) out[o + j] = fn(a[pa + j]!, y); }
    else if (ia === 0 && ib === 1) { const x = a[pa]!; for (let j = 0; j < inner; j++) out[o + j] = fn(x, b[pb + j]!); }
    else for (let j = 0; j < inner; j++) out[o + j] = fn(a[pa + j * ia]!, b[pb + j * ib]!);
    for (let ax = rank - 2; ax >= 0; ax--) {
      counter[ax]!++;
      pa += sa[ax]!; pb += sb[ax]!;
      if (counter[ax]! < outDims[ax]!) break;
      pa -= sa[ax]! * counter[ax]!; pb -= sb[ax]! * counter[ax]!;
      counter[ax] = 0;
    }
  }
}

/** out[i] = fn(vals) where vals[k] is input k's element at output position i (the vals array is reused). */
export function broadcastNary(
  inputs: ReadonlyArray<{ data: NumArray; dims: readonly number[] }>,
  fn: (vals: number[]) => number, out: NumArray, outDims: readonly number[],
): void {
  const n = elementCount(outDims);
  const k = inputs.length;
  const idx = inputs.map((x) => (sameDims(x.dims, outDims) ? undefined : broadcastIndex(x.dims, outDims)));
  const vals = new Array<number>(k).fill(0);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j < k; j++) {
      const ix = idx[j];
      vals[j] = inputs[j]!.data[ix ? ix[i]! : i]!;
    }
    out[i] = fn(vals);
  }
}

/** Copy `data` (shape dims) broadcast to outDims into out. */
export function expandTo(data: NumArray, dims: readonly number[], out: NumArray, outDims: readonly number[]): void {
  const n = elementCount(outDims);
  if (sameDims(dims, outDims)) { out.set(data.subarray(0, n)); return; }
  if (data.length === 1) { out.fill(data[0]!, 0, n); return; }
  const idx = broadcastIndex(dims, outDims);
  for (let i = 0; i < n; i++) out[i] = data[idx[i]!]!;
}
