// Norm after a Conv (1-D/2-D/3-D, grouped, depthwise): W' = s ⊙ W along output channels (W is
// [Cout, Cin/group, k...]), b' = s*b + t.
import { decodeValues, scaledMaxAbs } from '../values.js';
import { addConstantInput, scaleConstant, replaceConstant } from '../apply.js';
import { isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import { layouts, maxAbs, producerBias, weightView, type WeightView } from '../weights.js';
import { fitsStorage, overflow, producerOutputFree, takeOverRun, type FoldRule } from './rule.js';

interface Data { view: WeightView; map: Int32Array; bias: Float64Array }

export const convProducer: FoldRule<Data> = {
  name: 'conv-producer',
  op: 'Conv',
  direction: 'into-producer',
  match(_ctx, run, layer) {
    const busy = producerOutputFree(layer, run);
    if (busy) return busy;
    const a = resolveRun(run, layer.rank, layer.rank! - 2, layer.outChannels);
    if (isRefusal(a)) return a;
    const t = layer.weight.tensor;
    const v = weightView(t.dims);
    const map = layouts.convOutput(v);
    if (!fitsStorage(scaledMaxAbs(t, v, map, a.scale), t.dataType)) return overflow('weights', t.dataType);
    const bias = producerBias(layer.bias ? decodeValues(layer.bias.tensor) : undefined, a);
    if (!fitsStorage(maxAbs(bias), t.dataType)) return overflow('bias', t.dataType);
    return { rule: convProducer, run, layer, affine: a, adds: 0, data: { view: v, map, bias } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    scaleConstant(ctx, edit, layer.node, 1, layer.weight, data.view, data.map, m.affine.scale);
    if (layer.bias) replaceConstant(ctx, edit, layer.node, 2, layer.bias, data.bias, layer.bias.tensor.dims);
    else addConstantInput(ctx, edit, layer.node, 2, `${layer.weight.name}.bias`, layer.weight.tensor.dataType, data.bias, [data.bias.length]);
    takeOverRun(edit, layer, run);
    edit.regionOutputs = [run.bottom];
  },
};
