// Norm after a Gemm (Y = alpha*A'*B' + beta*C, any transA/transB): the columns of B' are scaled by s and the
// bias becomes C' = beta*s⊙C + t, shaped as C broadcast against [N] (so any broadcastable C, or none, works),
// with beta set to 1.
import { decodeValues, type ScaleGuard } from '../values.js';
import { addConstantInput, scaleConstant, changeOf, replaceConstant } from '../apply.js';
import { isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import { gemmBias, layouts, maxAbs, weightView, type ChannelMap } from '../weights.js';
import { biasName, fitsStorage, overflow, producerOutputFree, takeOverRun, type FoldRule, weightRangeCheck } from './rule.js';

interface Data { map: ChannelMap; guard?: ScaleGuard; bias: { values: Float64Array; dims: number[] } }

export const gemmProducer: FoldRule<Data> = {
  name: 'gemm-producer',
  op: 'Gemm',
  direction: 'into-producer',
  match(ctx, run, layer) {
    const busy = producerOutputFree(ctx, layer, run);
    if (busy) return busy;
    const a = resolveRun(run, 2, 0, layer.outChannels);
    if (isRefusal(a)) return a;
    const t = layer.weight.tensor;
    const v = weightView(t.dims);
    const map = layer.transB ? layouts.rows(v) : layouts.columns(v);
    const range = weightRangeCheck(ctx, t, map, a.scale);
    if (isRefusal(range)) return range;
    const c = layer.bias ? { values: decodeValues(layer.bias.tensor), dims: layer.bias.tensor.dims, name: layer.bias.tensor.name } : undefined;
    const bias = gemmBias(c, layer.beta, a.scale, a.shift);
    if (!fitsStorage(maxAbs(bias.values), t.dataType)) return overflow('bias', t.dataType);
    return { rule: gemmProducer, run, layer, affine: a, adds: 0, data: { map, guard: range.guard, bias } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    scaleConstant(ctx, edit, layer.node, 1, layer.weight, data.map, m.affine.scale, data.guard);
    if (layer.bias) replaceConstant(ctx, edit, layer.node, 2, layer.bias, data.bias.values, data.bias.dims);
    else addConstantInput(ctx, edit, layer.node, 2, biasName(layer), layer.weight.tensor.dataType, data.bias.values, data.bias.dims);
    if (layer.node.attributes.some((x) => x.name === 'beta')) changeOf(edit, layer.node).attributes = layer.node.attributes.filter((x) => x.name !== 'beta');
    takeOverRun(ctx, edit, layer, run);
    edit.regionOutputs = [run.bottom];
  },
};
