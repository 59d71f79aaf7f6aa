// Shape-only rewrites that share the input's data: Flatten, Reshape, Squeeze, Unsqueeze.
import { attrInt, attrInts } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { badModel, elementCount, intList, need, reshaped } from './common.js';

export const Flatten: Kernel = {
  op: 'Flatten', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const rank = x.dims.length;
    let axis = attrInt(ctx.node, 'axis', 1);
    if (axis < 0) axis += rank;
    if (axis < 0 || axis > rank) throw badModel(ctx, `axis ${attrInt(ctx.node, 'axis', 1)} is out of range for rank ${rank}`);
    return [reshaped(x, [elementCount(x.dims.slice(0, axis)), elementCount(x.dims.slice(axis))])];
  },
};

/** Resolve a Reshape target: 0 copies the input dim (unless allowzero), -1 takes what is left. */
export function reshapeTarget(inDims: number[], shape: number[], allowZero: boolean, ctx: KernelContext): number[] {
  const dims = shape.map((d, i) => (d === 0 && !allowZero ? inDims[i] ?? 0 : d));
  const total = elementCount(inDims);
  const unknown = dims.indexOf(-1);
  if (unknown >= 0) {
    if (dims.indexOf(-1, unknown + 1) >= 0) throw badModel(ctx, `shape [${shape}] has more than one -1`);
    const known = dims.reduce((p, d, i) => (i === unknown ? p : p * d), 1);
    if (known === 0 || total % known !== 0) throw badModel(ctx, `cannot reshape [${inDims}] to [${shape}]`);
    dims[unknown] = total / known;
  }
  if (elementCount(dims) !== total || dims.some((d) => d < 0)) throw badModel(ctx, `cannot reshape [${inDims}] to [${shape}]`);
  return dims;
}

export const Reshape: Kernel = {
  op: 'Reshape', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const shape = ctx.opset < 5 ? attrInts(ctx.node, 'shape') ?? [] : intList(need(inputs, 1, ctx));
    const allowZero = ctx.opset >= 14 && attrInt(ctx.node, 'allowzero', 0) === 1;
    return [reshaped(x, reshapeTarget(x.dims, shape, allowZero, ctx))];
  },
};

/** Axes from the attribute (opset < 13) or the optional second input (opset >= 13). */
function axesOf(inputs: Array<Value | undefined>, ctx: KernelContext): number[] | undefined {
  if (ctx.opset < 13) return attrInts(ctx.node, 'axes');
  return inputs[1] ? intList(inputs[1]) : undefined;
}

export const Squeeze: Kernel = {
  op: 'Squeeze', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const rank = x.dims.length;
    const axes = axesOf(inputs, ctx)?.map((a) => (a < 0 ? a + rank : a));
    const drop = new Set(axes ?? x.dims.flatMap((d, i) => (d === 1 ? [i] : [])));
    for (const a of drop) {
      if (!(a >= 0 && a < rank) || x.dims[a] !== 1) throw badModel(ctx, `cannot squeeze axis ${a} of shape [${x.dims}]`);
    }
    return [reshaped(x, x.dims.filter((_, i) => !drop.has(i)))];
  },
};

export const Unsqueeze: Kernel = {
  op: 'Unsqueeze', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const axes = axesOf(inputs, ctx);
    if (!axes) throw badModel(ctx, 'axes are missing');
    const rank = x.dims.length + axes.length;
    const at = new Set(axes.map((a) => (a < 0 ? a + rank : a)));
    if (at.size !== axes.length || [...at].some((a) => a < 0 || a >= rank)) throw badModel(ctx, `axes [${axes}] are invalid for output rank ${rank}`);
    const dims: number[] = [];
    let k = 0;
    for (let i = 0; i < rank; i++) dims.push(at.has(i) ? 1 : x.dims[k++]!);
    return [reshaped(x, dims)];
  },
};
