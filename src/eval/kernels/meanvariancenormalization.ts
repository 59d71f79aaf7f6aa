// MeanVarianceNormalization (opsets 9, 13): y = (x - mean) / (sqrt(variance) + 1e-9) over `axes` (default
// [0, 2, 3]), where variance = E[x^2] - E[x]^2 as the ONNX function body defines it (here computed as the mean
// squared deviation, the same quantity without the cancellation).
import { attrInts } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, need, normAxis, stridesOf } from './common.js';

export const MeanVarianceNormalization: Kernel = {
  op: 'MeanVarianceNormalization', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const rank = x.dims.length;
    const axes = new Set((attrInts(ctx.node, 'axes') ?? [0, 2, 3]).map((a) => normAxis(a, rank, ctx)));
    // group id of each element: its coordinates on the kept axes
    const st = stridesOf(x.dims);
    const kept = x.dims.map((_, d) => d).filter((d) => !axes.has(d));
    const groupStrides = stridesOf(kept.map((d) => x.dims[d]!));
    const groups = kept.reduce((p, d) => p * x.dims[d]!, 1);
    const gid = new Int32Array(x.data.length);
    for (let i = 0; i < x.data.length; i++) {
      let g = 0;
      kept.forEach((d, j) => { g += (Math.floor(i / st[d]!) % x.dims[d]!) * groupStrides[j]!; });
      gid[i] = g;
    }
    const sum = new Float64Array(groups), cnt = new Float64Array(groups), dev = new Float64Array(groups);
    for (let i = 0; i < x.data.length; i++) { sum[gid[i]!] += x.data[i]!; cnt[gid[i]!]++; }
    for (let g = 0; g < groups; g++) sum[g] /= cnt[g]!;
    for (let i = 0; i < x.data.length; i++) { const d = x.data[i]! - sum[gid[i]!]!; dev[gid[i]!] += d * d; }
    const out = alloc(x.type, x.data.length, ctx, false);
    for (let i = 0; i < x.data.length; i++) {
      const g = gid[i]!;
      out[i] = (x.data[i]! - sum[g]!) / (Math.sqrt(dev[g]! / cnt[g]!) + 1e-9);
    }
    return [{ type: x.type, dims: [...x.dims], data: out }];
  },
};
