// ScatterElements (opsets 11, 13, 16 with reduction add/mul, 18 with max/min) and the deprecated Scatter
// (opsets 9-10, same semantics without reduction): a copy of `data` where, for each element i of `indices`,
// position (i with its `axis` coordinate replaced by indices[i]) receives updates[i] (or is reduced with it).
// Duplicate indices without reduction: the last update wins, as in the ONNX reference implementation.
import { attrInt, attrString } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, badModel, elementOffsets, need, normAxis, unsupported } from './common.js';

/** The reduction of the opset's form (none before opset 16; max/min from 18). */
export function reducer(ctx: KernelContext): ((a: number, b: number) => number) | undefined {
  const red = ctx.opset >= 16 ? attrString(ctx.node, 'reduction', 'none') : 'none';
  switch (red) {
    case 'none': return undefined;
    case 'add': return (a, b) => a + b;
    case 'mul': return (a, b) => a * b;
    case 'max': if (ctx.opset >= 18) return (a, b) => Math.max(a, b); break;
    case 'min': if (ctx.opset >= 18) return (a, b) => Math.min(a, b); break;
  }
  throw unsupported(ctx, `reduction '${red}'`);
}

function scatterElements(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const data = need(inputs, 0, ctx), indices = need(inputs, 1, ctx), updates = need(inputs, 2, ctx);
  const rank = data.dims.length;
  if (indices.dims.length !== rank || updates.dims.join(',') !== indices.dims.join(',')) {
    throw badModel(ctx, `indices [${indices.dims}] and updates [${updates.dims}] must have the same dims and data's rank`);
  }
  const axis = normAxis(attrInt(ctx.node, 'axis', 0), rank, ctx);
  const reduce = reducer(ctx);
  const out = alloc(data.type, data.data.length, ctx, false);
  out.set(data.data);
  const offsets = elementOffsets(data.dims, indices, axis, ctx);
  for (let i = 0; i < offsets.length; i++) {
    const at = offsets[i]!;
    out[at] = reduce ? reduce(out[at]!, updates.data[i]!) : updates.data[i]!;
  }
  return [{ type: data.type, dims: [...data.dims], data: out }];
}

export const ScatterElements: Kernel = { op: 'ScatterElements', domain: '', sinceVersion: 11, run: scatterElements };

/** Scatter: deprecated since opset 11 in favour of ScatterElements (same semantics). */
export const Scatter: Kernel = { op: 'Scatter', domain: '', sinceVersion: 9, run: scatterElements };
