// TopK (opsets 1, 10, 11): the k largest (or, from opset 11 with largest=0, smallest) elements along `axis`
// (default -1), with their int64 indices. k is an attribute before opset 10 and a 1-element input after. Ties
// go to the lower index first (ONNX TopK docs); with sorted=0 the same order is returned, which the standard
// allows. NaN compares above every number, as numpy's sort places it.
import { DataType, attrInt } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, badModel, elementCount, need, normAxis } from './common.js';

function topk(x: Value, k: number, ctx: KernelContext): Value[] {
  const rank = x.dims.length;
  const axis = normAxis(attrInt(ctx.node, 'axis', -1), rank, ctx);
  const largest = ctx.opset >= 11 ? attrInt(ctx.node, 'largest', 1) !== 0 : true;
  const len = x.dims[axis]!;
  if (!(k >= 0 && k <= len)) throw badModel(ctx, `k = ${k} is outside [0, ${len}] for axis ${axis}`);
  const outer = elementCount(x.dims.slice(0, axis)), inner = elementCount(x.dims.slice(axis + 1));
  const dims = [...x.dims];
  dims[axis] = k;
  const n = outer * k * inner;
  const vals = alloc(x.type, n, ctx, false), idx = alloc(DataType.INT64, n, ctx, false);
  const order = Array.from({ length: len }, (_, i) => i);
  const key = new Float64Array(len);
  const sign = largest ? -1 : 1;
  const cmp = (a: number, b: number) => {
    const va = key[a]!, vb = key[b]!;
    if (va !== vb) {
      if (Number.isNaN(va)) return -sign; // NaN counts as the largest value
      if (Number.isNaN(vb)) return sign;
      return sign * (va - vb);
    }
    return a - b;
  };
  for (let o = 0; o < outer; o++) {
    for (let i = 0; i < inner; i++) {
      const base = o * len * inner + i;
      for (let j = 0; j < len; j++) { key[j] = x.data[base + j * inner]!; order[j] = j; }
      order.sort(cmp);
      const ob = o * k * inner + i;
      for (let j = 0; j < k; j++) {
        vals[ob + j * inner] = key[order[j]!]!;
        idx[ob + j * inner] = order[j]!;
      }
    }
  }
  return [{ type: x.type, dims, data: vals }, { type: DataType.INT64, dims: [...dims], data: idx }];
}

export const TopK1: Kernel = {
  op: 'TopK', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const k = attrInt(ctx.node, 'k');
    if (k === undefined) throw badModel(ctx, 'attribute k is missing');
    return topk(need(inputs, 0, ctx), k, ctx);
  },
};

export const TopK10: Kernel = {
  op: 'TopK', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const kv = need(inputs, 1, ctx);
    if (kv.data.length !== 1) throw badModel(ctx, `input K has ${kv.data.length} elements, expected 1`);
    return topk(need(inputs, 0, ctx), kv.data[0]!, ctx);
  },
};
