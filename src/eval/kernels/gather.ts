// Gather: picks slices of `data` along `axis` (default 0) at `indices`; negative indices count from the end.
// Output shape is data.dims[:axis] + indices.dims + data.dims[axis+1:].
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need, normAxis } from './common.js';

export const Gather: Kernel = {
  op: 'Gather', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const data = need(inputs, 0, ctx), indices = need(inputs, 1, ctx);
    const axis = normAxis(attrInt(ctx.node, 'axis', 0), data.dims.length, ctx);
    const len = data.dims[axis]!;
    const outer = elementCount(data.dims.slice(0, axis));
    const inner = elementCount(data.dims.slice(axis + 1));
    const dims = [...data.dims.slice(0, axis), ...indices.dims, ...data.dims.slice(axis + 1)];
    const count = indices.data.length;
    const out = alloc(data.type, elementCount(dims), ctx);
    for (let k = 0; k < count; k++) {
      let idx = indices.data[k]!;
      if (idx < 0) idx += len;
      if (!(idx >= 0 && idx < len)) throw badModel(ctx, `index ${indices.data[k]} is out of range for axis ${axis} of length ${len}`);
      for (let o = 0; o < outer; o++) {
        const from = (o * len + idx) * inner;
        out.set(data.data.subarray(from, from + inner), (o * count + k) * inner);
      }
    }
    return [{ type: data.type, dims, data: out }];
  },
};
