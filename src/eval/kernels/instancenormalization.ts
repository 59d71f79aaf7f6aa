// InstanceNormalization (opsets 1, 6): per sample and channel, Y = (X - mean) / sqrt(var + epsilon) * scale[c] + B[c]
// with mean and (biased) variance over the spatial axes.
import { attrFloat, elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, need } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const X = need(inputs, 0, ctx, 'input'), S = need(inputs, 1, ctx, 'scale'), B = need(inputs, 2, ctx, 'B');
  if (X.dims.length < 3) throw badModel(ctx, `input has rank ${X.dims.length}; InstanceNormalization needs N x C x D1 ...`);
  const N = X.dims[0]!, C = X.dims[1]!, inner = elementCount(X.dims.slice(2));
  if (S.data.length !== C || B.data.length !== C) throw badModel(ctx, `scale and B need ${C} values (one per channel)`);
  const eps = attrFloat(ctx.node, 'epsilon', 1e-5);
  const x = X.data, Y = allocFloat(x.length, ctx.precision, false);
  for (let n = 0; n < N; n++) {
    for (let c = 0; c < C; c++) {
      const o = (n * C + c) * inner;
      let sum = 0;
      for (let i = o; i < o + inner; i++) sum += x[i]!;
      const mean = sum / inner;
      let sq = 0;
      for (let i = o; i < o + inner; i++) { const d = x[i]! - mean; sq += d * d; }
      const a = S.data[c]! / Math.sqrt(sq / inner + eps), b = B.data[c]!;
      for (let i = o; i < o + inner; i++) Y[i] = (x[i]! - mean) * a + b;
    }
  }
  return [{ type: X.type, dims: [...X.dims], data: Y }];
}

export const InstanceNormalization: Kernel = { op: 'InstanceNormalization', domain: '', sinceVersion: 1, run };
