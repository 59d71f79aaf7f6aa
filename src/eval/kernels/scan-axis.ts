// Cutting a tensor into its slices along one axis and stacking per-iteration values back along an axis: the
// data movement Loop (scan outputs) and Scan (scan inputs and outputs) share.
import { elementCount } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { KernelContext, Value } from '../value.js';
import { alloc } from './common.js';

/** Slice i of v along `axis`, with that axis removed. */
export function sliceAt(v: Value, axis: number, i: number, ctx: KernelContext): Value {
  const dims = v.dims, len = dims[axis]!;
  const outer = elementCount(dims.slice(0, axis)), inner = elementCount(dims.slice(axis + 1));
  const data = alloc(v.type, outer * inner, ctx, false);
  for (let o = 0; o < outer; o++) data.set(v.data.subarray((o * len + i) * inner, (o * len + i + 1) * inner), o * inner);
  return { type: v.type, dims: [...dims.slice(0, axis), ...dims.slice(axis + 1)], data };
}

/**
 * Stack equal-shaped values along a new axis `axis` (0..rank). `reverse` puts the first value last.
 * `emptyDims` gives the slice shape when there are no values (zero iterations).
 */
export function stackAlong(parts: Value[], axis: number, reverse: boolean, ctx: KernelContext, what: string, type: number, emptyDims: number[]): Value {
  const sliceDims = parts[0]?.dims ?? emptyDims;
  const n = parts.length;
  if (axis < 0 || axis > sliceDims.length) throw badModel(ctx, `${what}: axis ${axis} is out of range for rank ${sliceDims.length + 1}`);
  const dims = [...sliceDims.slice(0, axis), n, ...sliceDims.slice(axis)];
  const outer = elementCount(sliceDims.slice(0, axis)), inner = elementCount(sliceDims.slice(axis));
  const data = alloc(type, elementCount(dims), ctx, false);
  parts.forEach((p, k) => {
    if (p.dims.join(',') !== sliceDims.join(',')) {
      throw badModel(ctx, `${what}: iteration ${k} gives dims [${p.dims.join(',')}] but iteration 0 gave [${sliceDims.join(',')}]`);
    }
    const pos = reverse ? n - 1 - k : k;
    for (let o = 0; o < outer; o++) data.set(p.data.subarray(o * inner, (o + 1) * inner), (o * n + pos) * inner);
  });
  return { type, dims, data };
}
