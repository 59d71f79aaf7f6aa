// LayerNormalization (opset 17): normalize over axes [axis, rank) with mean and (biased) variance, then
// Y = normalized * Scale + B, Scale and B broadcast to the normalized shape. Optional outputs Mean and
// InvStdDev have the input's leading dims and size-1 normalized axes.
import { attrFloat, attrInt, elementCount } from '../../graph/ir.js';
import { DataType } from '../../graph/ir.js';
import { allocFloat, badModel, need, normAxis } from '../attrs.js';
import { broadcastIndex, broadcastShape } from '../broadcast.js';
import type { Kernel, KernelContext, Value } from '../value.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const X = need(inputs, 0, ctx, 'X'), S = need(inputs, 1, ctx, 'Scale'), B = inputs[2];
  const rank = X.dims.length;
  const axis = normAxis(ctx, attrInt(ctx.node, 'axis', -1), rank);
  const eps = attrFloat(ctx.node, 'epsilon', 1e-5);
  const normDims = X.dims.slice(axis);
  const inner = elementCount(normDims), outer = elementCount(X.dims.slice(0, axis));
  const where = `node '${ctx.node.name}' (LayerNormalization)`;
  for (const p of B ? [S, B] : [S]) {
    const bd = broadcastShape([normDims, p.dims], where);
    if (bd.length !== normDims.length || bd.some((d, i) => d !== normDims[i])) throw badModel(ctx, `Scale/B dims [${p.dims.join(',')}] do not broadcast to [${normDims.join(',')}]`);
  }
  const si = broadcastIndex(S.dims, normDims), bi = B ? broadcastIndex(B.dims, normDims) : undefined;
  const x = X.data, Y = allocFloat(x.length, ctx.precision, false);
  const statDims = [...X.dims.slice(0, axis), ...normDims.map(() => 1)];
  const M = allocFloat(outer, ctx.precision), R = allocFloat(outer, ctx.precision);
  for (let o = 0; o < outer; o++) {
    const off = o * inner;
    let sum = 0;
    for (let i = 0; i < inner; i++) sum += x[off + i]!;
    const mean = sum / inner;
    let sq = 0;
    for (let i = 0; i < inner; i++) { const d = x[off + i]! - mean; sq += d * d; }
    const inv = 1 / Math.sqrt(sq / inner + eps);
    M[o] = mean; R[o] = inv;
    for (let i = 0; i < inner; i++) {
      Y[off + i] = (x[off + i]! - mean) * inv * S.data[si[i]!]! + (B ? B.data[bi![i]!]! : 0);
    }
  }
  if (inner === 0) throw badModel(ctx, 'normalized axes are empty');
  const statType = attrInt(ctx.node, 'stash_type', 1) === 1 ? DataType.FLOAT : X.type;
  return [
    { type: X.type, dims: [...X.dims], data: Y },
    { type: statType, dims: statDims, data: M },
    { type: statType, dims: [...statDims], data: R },
  ];
}

export const LayerNormalization: Kernel = { op: 'LayerNormalization', domain: '', sinceVersion: 17, run };
