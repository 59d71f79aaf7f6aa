// ReverseSequence (opset 10): for each batch entry b, reverses the first sequence_lens[b] elements along
// time_axis (default 0) and keeps the rest; batch_axis defaults to 1.
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need, normAxis, stridesOf } from './common.js';

export const ReverseSequence: Kernel = {
  op: 'ReverseSequence', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), lens = need(inputs, 1, ctx);
    const rank = x.dims.length;
    const bAxis = normAxis(attrInt(ctx.node, 'batch_axis', 1), rank, ctx), tAxis = normAxis(attrInt(ctx.node, 'time_axis', 0), rank, ctx);
    if (bAxis === tAxis) throw badModel(ctx, 'batch_axis and time_axis are the same axis');
    const st = stridesOf(x.dims);
    const T = x.dims[tAxis]!;
    if (lens.data.length !== x.dims[bAxis]) throw badModel(ctx, `sequence_lens has ${lens.data.length} entries for a batch of ${x.dims[bAxis]}`);
    const out = alloc(x.type, x.data.length, ctx, false);
    for (let i = 0; i < x.data.length; i++) {
      const t = Math.floor(i / st[tAxis]!) % T, b = Math.floor(i / st[bAxis]!) % x.dims[bAxis]!;
      const len = lens.data[b]!;
      if (!(len >= 0 && len <= T)) throw badModel(ctx, `sequence length ${len} is outside [0, ${T}]`);
      const src = t < len ? i + (len - 1 - 2 * t) * st[tAxis]! : i;
      out[i] = x.data[src]!;
    }
    return [{ type: x.type, dims: [...x.dims], data: out }];
  },
};
