// LayerNormalization (opset 17): normalize over axes [axis, rank) with mean and (biased) variance, then
// Y = normalized * Scale + B, Scale and B broadcast against X (as the function body's Mul and Add do). Optional outputs Mean and
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
  // Scale and B broadcast against X as the operator's function body multiplies and adds them (numpy rules): the
  // result must keep X's shape. Leading size-1 axes aside ([1, D] for [D]), they usually span the normalized
  // axes only and are indexed by position within them; one that varies over the leading axes is indexed by the
  // element's position in X.
  let acrossRows = false;
  for (const p of B ? [S, B] : [S]) {
    const bd = broadcastShape([X.dims, p.dims], where);
    if (bd.length !== rank || bd.some((d, i) => d !== X.dims[i])) throw badModel(ctx, `Scale/B dims [${p.dims.join(',')}] do not broadcast to the input's [${X.dims.join(',')}]`);
    const first = p.dims.findIndex((d) => d !== 1);
    if (first >= 0 && p.dims.length - first > normDims.length) acrossRows = true;
  }
  const rowDims = (p: Value) => p.dims.slice(Math.max(0, p.dims.length - normDims.length));
  const [si, bi] = acrossRows
    ? [broadcastIndex(S.dims, X.dims), B ? broadcastIndex(B.dims, X.dims) : undefined]
    : [broadcastIndex(rowDims(S), normDims), B ? broadcastIndex(rowDims(B), normDims) : undefined];
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
    const at = acrossRows ? off : 0; // (index arrays over all of X, or over one row of normalized axes)
    for (let i = 0; i < inner; i++) {
      Y[off + i] = (x[off + i]! - mean) * inv * S.data[si[at + i]!]! + (B ? B.data[bi![at + i]!]! : 0);
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
