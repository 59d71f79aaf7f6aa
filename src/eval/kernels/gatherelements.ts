// GatherElements (opsets 11, 13): out[i_0..i_r] = data[i_0..index(i)..i_r] with the index taken along `axis`
// (default 0) from `indices`, which has data's rank; negative indices count from the end.
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need, normAxis, stridesOf } from './common.js';

export const GatherElements: Kernel = {
  op: 'GatherElements', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const data = need(inputs, 0, ctx), indices = need(inputs, 1, ctx);
    const rank = data.dims.length;
    if (indices.dims.length !== rank) throw badModel(ctx, `indices have rank ${indices.dims.length}, data rank ${rank}`);
    const axis = normAxis(attrInt(ctx.node, 'axis', 0), rank, ctx);
    const len = data.dims[axis]!;
    const ds = stridesOf(data.dims), is = stridesOf(indices.dims);
    const n = elementCount(indices.dims);
    const out = alloc(data.type, n, ctx, false);
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
      out[i] = data.data[off + idx * ds[axis]!]!;
    }
    return [{ type: data.type, dims: [...indices.dims], data: out }];
  },
};
