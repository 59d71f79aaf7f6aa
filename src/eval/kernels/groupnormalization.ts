// GroupNormalization: channels split into num_groups groups; each (sample, group) is normalized with its own
// mean and (biased) variance over the group's channels and spatial positions, then scaled and shifted.
// Opset 18 has one scale/bias per group; opset 21 has one per channel.
import { attrFloat, attrInt, elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, need } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const X = need(inputs, 0, ctx, 'X'), S = need(inputs, 1, ctx, 'scale'), B = need(inputs, 2, ctx, 'bias');
  const G = attrInt(ctx.node, 'num_groups');
  if (G === undefined || G < 1) throw badModel(ctx, 'attribute num_groups is required and must be positive');
  const eps = attrFloat(ctx.node, 'epsilon', 1e-5);
  if (X.dims.length < 2) throw badModel(ctx, `input has rank ${X.dims.length}; GroupNormalization needs N x C x ...`);
  const N = X.dims[0]!, C = X.dims[1]!, spatial = elementCount(X.dims.slice(2));
  if (C % G !== 0) throw badModel(ctx, `${C} channels do not split into ${G} groups`);
  const perChannel = ctx.opset >= 21;
  const P = perChannel ? C : G;
  if (S.data.length !== P || B.data.length !== P) throw badModel(ctx, `scale and bias need ${P} values (one per ${perChannel ? 'channel' : 'group'})`);
  const cg = C / G, size = cg * spatial;
  const x = X.data, Y = allocFloat(x.length, ctx.precision, false);
  for (let n = 0; n < N; n++) {
    for (let g = 0; g < G; g++) {
      const off = (n * C + g * cg) * spatial;
      let sum = 0;
      for (let i = off; i < off + size; i++) sum += x[i]!;
      const mean = sum / size;
      let sq = 0;
      for (let i = off; i < off + size; i++) { const d = x[i]! - mean; sq += d * d; }
      const inv = 1 / Math.sqrt(sq / size + eps);
      for (let c = 0; c < cg; c++) {
        const p = perChannel ? g * cg + c : g;
        const a = S.data[p]! * inv, b = B.data[p]!;
        const o = off + c * spatial;
        for (let i = o; i < o + spatial; i++) Y[i] = (x[i]! - mean) * a + b;
      }
    }
  }
  return [{ type: X.type, dims: [...X.dims], data: Y }];
}

export const GroupNormalization: Kernel = { op: 'GroupNormalization', domain: '', sinceVersion: 18, run };
