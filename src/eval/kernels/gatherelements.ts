// GatherElements (opsets 11, 13): out[i_0..i_r] = data[i_0..index(i)..i_r] with the index taken along `axis`
// (default 0) from `indices`, which has data's rank; negative indices count from the end.
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementOffsets, need, normAxis } from './common.js';

export const GatherElements: Kernel = {
  op: 'GatherElements', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const data = need(inputs, 0, ctx), indices = need(inputs, 1, ctx);
    const rank = data.dims.length;
    if (indices.dims.length !== rank) throw badModel(ctx, `indices have rank ${indices.dims.length}, data rank ${rank}`);
    const axis = normAxis(attrInt(ctx.node, 'axis', 0), rank, ctx);
    const at = elementOffsets(data.dims, indices, axis, ctx);
    const out = alloc(data.type, at.length, ctx, false);
    for (let i = 0; i < at.length; i++) out[i] = data.data[at[i]!]!;
    return [{ type: data.type, dims: [...indices.dims], data: out }];
  },
};
