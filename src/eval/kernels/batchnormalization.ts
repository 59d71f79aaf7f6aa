// BatchNormalization in inference form (opsets 1-15): Y = (X - mean) / sqrt(var + epsilon) * scale + B,
// per channel (axis 1), or per activation for the legacy spatial=0 form (opsets < 9), where scale, B, mean
// and var have the shape of one sample [C, D1, ...]. Training mode (training_mode=1 at 14+, or reading the
// running/saved statistics outputs) uses batch statistics and is refused.
import { attrFloat, attrInt } from '../../graph/ir.js';
import { allocFloat, badModel, need, unsupported } from '../attrs.js';
import type { Kernel, KernelContext, NumArray, Value } from '../value.js';

const PARAM_NAMES = ['scale', 'B', 'mean', 'var'] as const;

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const X = need(inputs, 0, ctx, 'X');
  const scale = need(inputs, 1, ctx, 'scale'), B = need(inputs, 2, ctx, 'B');
  const mean = need(inputs, 3, ctx, 'mean'), vari = need(inputs, 4, ctx, 'var');
  if (ctx.opset >= 14 && attrInt(ctx.node, 'training_mode', 0) !== 0) throw unsupported(ctx, 'training_mode=1 (batch statistics)');
  const outs = ctx.node.outputs; // (indexed loops below: this runs once per node per probe, so no arrays per call)
  for (let k = 1; k < outs.length; k++) if (outs[k] !== '') throw unsupported(ctx, 'training outputs (running or saved mean/var)');
  if (ctx.opset < 7 && attrInt(ctx.node, 'is_test', 0) === 0 && ctx.node.outputs.length > 1) throw unsupported(ctx, 'is_test=0 with statistics outputs');
  const eps = attrFloat(ctx.node, 'epsilon', 1e-5);
  if (X.dims.length < 2) throw badModel(ctx, `input X has rank ${X.dims.length}; BatchNormalization needs N x C x ...`);
  const N = X.dims[0]!, C = X.dims[1]!;
  let sample = 1;
  for (let k = 1; k < X.dims.length; k++) sample *= X.dims[k]!;
  const spatial = ctx.opset < 9 ? attrInt(ctx.node, 'spatial', 1) : 1;
  // per-activation statistics: one parameter per element of a sample
  const perActivation = spatial === 0 && scale.data.length === sample && sample !== C;
  const P = perActivation ? sample : C;
  const params = [scale, B, mean, vari];
  for (let k = 0; k < 4; k++) {
    const v = params[k]!;
    if (v.data.length !== P) throw badModel(ctx, `${PARAM_NAMES[k]} has ${v.data.length} values, expected ${P}${perActivation ? ' (one per activation)' : ' (one per channel)'}`);
  }
  const inner = sample / P; // spatial size per channel (1 for per-activation)
  // X's own array when nothing else reads it (each element is read before it is written)
  const reuse = ctx.reusable?.(0) && (ctx.precision === 'float32' ? X.data instanceof Float32Array : X.data instanceof Float64Array);
  const Y = reuse ? X.data : allocFloat(X.data.length, ctx.precision, false);
  const x = X.data;
  for (let n = 0; n < N; n++) {
    for (let c = 0; c < P; c++) {
      // (the same two operations for every sample: the same factor bit for bit, and no arrays of factors per call)
      const ac = scale.data[c]! * (1 / Math.sqrt(vari.data[c]! + eps)), mc = mean.data[c]!, bc = B.data[c]!;
      const o = n * sample + c * inner;
      affineInto(Y, x, o, o + inner, mc, ac, bc);
    }
  }
  return [{ type: X.type, dims: [...X.dims], data: Y }];
}

// Y[i] = (x[i] - m) * a + b over [lo, hi): a small function of its own, so it is optimized early and stays so
function affineInto(Y: NumArray, x: NumArray, lo: number, hi: number, m: number, a: number, b: number): void {
  for (let i = lo; i < hi; i++) Y[i] = (x[i]! - m) * a + b;
}

export const BatchNormalization: Kernel = { op: 'BatchNormalization', domain: '', sinceVersion: 1, run };
