// ScatterND (opsets 11, 13, 16 with reduction add/mul, 18 with max/min): a copy of `data` where each row of
// `indices` (last axis of length k) addresses a slice data[idx] of dims data.dims[k:], which receives the
// matching slice of `updates` (or is reduced with it). Negative indices count from the end.
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need } from './common.js';
import { reducer } from './scatterelements.js';

export const ScatterND: Kernel = {
  op: 'ScatterND', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const data = need(inputs, 0, ctx), indices = need(inputs, 1, ctx), updates = need(inputs, 2, ctx);
    const q = indices.dims.length, k = indices.dims[q - 1]!;
    const r = data.dims.length;
    const want = [...indices.dims.slice(0, q - 1), ...data.dims.slice(k)];
    if (q < 1 || k > r || updates.dims.join(',') !== want.join(',')) throw badModel(ctx, `updates [${updates.dims}] do not match indices [${indices.dims}] over data [${data.dims}]`);
    const reduce = reducer(ctx);
    const out = alloc(data.type, data.data.length, ctx, false);
    out.set(data.data);
    const slice = elementCount(data.dims.slice(k));
    const rows = elementCount(indices.dims.slice(0, q - 1));
    for (let t = 0; t < rows; t++) {
      let off = 0, stride = data.data.length;
      for (let j = 0; j < k; j++) {
        const len = data.dims[j]!;
        stride /= len;
        let idx = indices.data[t * k + j]!;
        if (idx < 0) idx += len;
        if (!(idx >= 0 && idx < len)) throw badModel(ctx, `index ${indices.data[t * k + j]} is out of range for axis ${j} of length ${len}`);
        off += idx * stride;
      }
      for (let e = 0; e < slice; e++) {
        const u = updates.data[t * slice + e]!;
        out[off + e] = reduce ? reduce(out[off + e]!, u) : u;
      }
    }
    return [{ type: data.type, dims: [...data.dims], data: out }];
  },
};
