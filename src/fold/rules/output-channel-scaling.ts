// The shared shape of the two convolution producer rules: a norm after the layer scales the layer's output
// channels (W' = s ⊙ W, b' = s*b + t). The rules differ only in which weight elements feed which output
// channel, so each rule module supplies that map and this builds the match and rewrite.
import { decodeValues, type ScaleGuard } from '../values.js';
import { addConstantInput, scaleConstant, replaceConstant } from '../apply.js';
import { isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import type { Layer, LayerOp } from '../layers.js';
import { maxAbs, producerBias, weightView, type ChannelMap, type WeightView } from '../weights.js';
import { fitsStorage, overflow, producerOutputFree, takeOverRun, type FoldRule, weightRangeCheck } from './rule.js';

export interface OutputScalingData { map: ChannelMap; guard?: ScaleGuard; bias: Float64Array }

/** A producer rule for a layer whose weight elements map to output channels through `channelMap`. */
export function outputChannelScaling(name: string, op: LayerOp, channelMap: (v: WeightView, layer: Layer) => ChannelMap): FoldRule<OutputScalingData> {
  const rule: FoldRule<OutputScalingData> = {
    name,
    op,
    direction: 'into-producer',
    match(ctx, run, layer) {
      const busy = producerOutputFree(ctx, layer, run);
      if (busy) return busy;
      const a = resolveRun(run, layer.rank, layer.rank! - 2, layer.outChannels);
      if (isRefusal(a)) return a;
      const t = layer.weight.tensor;
      const v = weightView(t.dims);
      const map = channelMap(v, layer);
      const range = weightRangeCheck(ctx, t, map, a.scale);
      if (isRefusal(range)) return range;
      const bias = producerBias(layer.bias ? decodeValues(layer.bias.tensor) : undefined, a);
      if (!fitsStorage(maxAbs(bias), t.dataType)) return overflow('bias', t.dataType);
      return { rule, run, layer, affine: a, adds: 0, data: { map, guard: range.guard, bias } };
    },
    rewrite(ctx, m, edit) {
      const { layer, run, data } = m;
      scaleConstant(ctx, edit, layer.node, 1, layer.weight, data.map, m.affine.scale, data.guard);
      if (layer.bias) replaceConstant(ctx, edit, layer.node, 2, layer.bias, data.bias, layer.bias.tensor.dims);
      else addConstantInput(ctx, edit, layer.node, 2, `${layer.weight.name}.bias`, layer.weight.tensor.dataType, data.bias, [data.bias.length]);
      takeOverRun(ctx, edit, layer, run);
      edit.regionOutputs = [run.bottom];
    },
  };
  return rule;
}
