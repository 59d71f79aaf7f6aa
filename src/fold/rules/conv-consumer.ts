// Norm before a Conv (grouped too) that does not pad its input: W' = W ⊙ s along input channels (input
// channel g*(Cin/group) + j for W[o, j, ...] with o in group g), b' = b + Σ W·t. A padded border would see
// t instead of 0, so any padding refuses the fold unless the map has no shift.
import { decodeValues, weightSource } from '../values.js';
import { hasShift } from '../affine.js';
import { addConstantInput, scaleConstant, replaceConstant } from '../apply.js';
import { isRefusal, refuse } from '../context.js';
import { resolveRun } from '../run.js';
import { contractShift, layouts, maxAbs, scaleWeights, weightView, type ChannelMap, type WeightView } from '../weights.js';
import { bypassRun, fitsStorage, overflow, type FoldRule } from './rule.js';

interface Data { view: WeightView; map: ChannelMap; bias: Float64Array }

const paddedInput = (unpadded: boolean, shifted: boolean) => !unpadded && shifted;

export const convConsumer: FoldRule<Data> = {
  name: 'conv-consumer',
  op: 'Conv',
  direction: 'into-consumer',
  match(_ctx, run, layer) {
    const a = resolveRun(run, layer.rank, layer.rank! - 2, layer.inChannels);
    if (isRefusal(a)) return a;
    if (paddedInput(layer.unpadded, hasShift(a))) return refuse('padded-consumer', `'${layer.label}' pads its input with zeros, and after a fold its border would see the norm's shift there; the norm can only fold into the layer that writes its input, or into '${layer.label}' if it is exported without padding`);
    const t = layer.weight.tensor;
    const weight = weightSource(t);
    const v = weightView(t.dims);
    const map = layouts.convInput(v, layer.group);
    const bias = contractShift(weight, v, map, 'a', layer.outChannels, a.shift);
    if (layer.bias) {
      const b = decodeValues(layer.bias.tensor);
      for (let i = 0; i < bias.length; i++) bias[i] += b[i]!;
    }
    if (!fitsStorage(scaleWeights(weight, map, a.scale), t.dataType)) return overflow('weights', t.dataType);
    if (!fitsStorage(maxAbs(bias), t.dataType)) return overflow('bias', t.dataType);
    return { rule: convConsumer, run, layer, affine: a, adds: 0, data: { view: v, map, bias } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    scaleConstant(ctx, edit, layer.node, 1, layer.weight, data.map, m.affine.scale);
    if (layer.bias) replaceConstant(ctx, edit, layer.node, 2, layer.bias, data.bias, layer.bias.tensor.dims);
    else if (hasShift(m.affine)) addConstantInput(ctx, edit, layer.node, 2, `${layer.weight.name}.bias`, layer.weight.tensor.dataType, data.bias, [data.bias.length]);
    bypassRun(ctx, edit, layer, run);
    edit.regionOutputs = layer.node.outputs.filter((o) => o !== '');
  },
};
