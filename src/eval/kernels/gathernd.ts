// GatherND (opsets 11, 12 with batch_dims, 13): the last axis of `indices` (length m) addresses a slice of
// `data` after the first batch_dims axes, which data and indices share. Output dims:
// data.dims[:b] + indices.dims[b:-1] + data.dims[b+m:]. Negative indices count from the end.
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need } from './common.js';

export const GatherND: Kernel = {
  op: 'GatherND', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const data = need(inputs, 0, ctx), indices = need(inputs, 1, ctx);
    const r = data.dims.length, q = indices.dims.length;
    const b = ctx.opset >= 12 ? attrInt(ctx.node, 'batch_dims', 0) : 0;
    const m = indices.dims[q - 1]!;
    if (q < 1 || b < 0 || b >= Math.min(r, q) || m > r - b) throw badModel(ctx, `indices [${indices.dims}] and batch_dims ${b} do not fit data [${data.dims}]`);
    for (let d = 0; d < b; d++) if (data.dims[d] !== indices.dims[d]) throw badModel(ctx, `batch axis ${d} differs: data ${data.dims[d]}, indices ${indices.dims[d]}`);
    const batch = elementCount(data.dims.slice(0, b));
    const perBatch = elementCount(indices.dims.slice(b, q - 1));
    const slice = elementCount(data.dims.slice(b + m));
    const batchStride = elementCount(data.dims.slice(b));
    const dims = [...data.dims.slice(0, b), ...indices.dims.slice(b, q - 1), ...data.dims.slice(b + m)];
    const out = alloc(data.type, elementCount(dims), ctx, false);
    for (let bi = 0; bi < batch; bi++) {
      for (let t = 0; t < perBatch; t++) {
        const row = (bi * perBatch + t) * m;
        let off = bi * batchStride;
        let stride = batchStride;
        for (let j = 0; j < m; j++) {
          const len = data.dims[b + j]!;
          stride /= len;
          let idx = indices.data[row + j]!;
          if (idx < 0) idx += len;
          if (!(idx >= 0 && idx < len)) throw badModel(ctx, `index ${indices.data[row + j]} is out of range for axis ${b + j} of length ${len}`);
          off += idx * stride;
        }
        out.set(data.data.subarray(off, off + slice), (bi * perBatch + t) * slice);
      }
    }
    return [{ type: data.type, dims, data: out }];
  },
};
