// Norm before a Gemm on the axis it contracts (A's K axis: the last axis, or the first when transA=1):
// rows of B' are scaled by s, and C' = beta*C + alpha*(t·B'), with beta set to 1.
import { decodeValues, weightSource } from '../values.js';
import { hasShift } from '../affine.js';
import { addConstantInput, scaleConstant, changeOf, replaceConstant } from '../apply.js';
import { isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import { contractShift, gemmBias, layouts, maxAbs, scaleWeights, weightView, type ChannelMap, type WeightView } from '../weights.js';
import { bypassRun, fitsStorage, overflow, type FoldRule } from './rule.js';

interface Data { view: WeightView; map: ChannelMap; bias?: { values: Float64Array; dims: number[] } }

export const gemmConsumer: FoldRule<Data> = {
  name: 'gemm-consumer',
  op: 'Gemm',
  direction: 'into-consumer',
  match(_ctx, run, layer) {
    const a = resolveRun(run, 2, layer.transA ? 1 : 0, layer.inChannels);
    if (isRefusal(a)) return a;
    const t = layer.weight.tensor;
    const weight = weightSource(t);
    const v = weightView(t.dims);
    const map = layer.transB ? layouts.columns(v) : layouts.rows(v);
    let bias: Data['bias'];
    if (hasShift(a)) {
      const tb = contractShift(weight, v, map, layer.transB ? 'a' : 'b', layer.outChannels, a.shift);
      for (let i = 0; i < tb.length; i++) tb[i] *= layer.alpha;
      const c = layer.bias ? { values: decodeValues(layer.bias.tensor), dims: layer.bias.tensor.dims, name: layer.bias.tensor.name } : undefined;
      bias = gemmBias(c, layer.beta, undefined, tb);
      if (!fitsStorage(maxAbs(bias.values), t.dataType)) return overflow('bias', t.dataType);
    }
    if (!fitsStorage(scaleWeights(weight, map, a.scale), t.dataType)) return overflow('weights', t.dataType);
    return { rule: gemmConsumer, run, layer, affine: a, adds: 0, data: { view: v, map, bias } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    scaleConstant(ctx, edit, layer.node, 1, layer.weight, data.map, m.affine.scale);
    if (data.bias) {
      if (layer.bias) replaceConstant(ctx, edit, layer.node, 2, layer.bias, data.bias.values, data.bias.dims);
      else addConstantInput(ctx, edit, layer.node, 2, `${layer.weight.name}.bias`, layer.weight.tensor.dataType, data.bias.values, data.bias.dims);
      if (layer.node.attributes.some((x) => x.name === 'beta')) changeOf(edit, layer.node).attributes = layer.node.attributes.filter((x) => x.name !== 'beta');
    }
    bypassRun(ctx, edit, layer, run);
    edit.regionOutputs = layer.node.outputs.filter((o) => o !== '');
  },
};
