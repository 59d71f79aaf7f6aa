// Norm before a MatMul with a constant 2-D weight W [K, N], on the axis it contracts (the input's last):
// rows of W are scaled by s and t·W becomes a bias: the C of a Gemm when the input is 2-D, else a new Add.
import { makeTensor } from '../../graph/tensor.js';
import { decodeValues, weightSource } from '../values.js';
import { hasShift } from '../affine.js';
import { addConstantInput, scaleConstant, changeOf, makeNode, replaceConstant } from '../apply.js';
import { freshName, isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import { contractShift, layouts, maxAbs, scaleWeights, weightView, type ChannelMap, type WeightView } from '../weights.js';
import { biasName, bypassRun, fitsStorage, overflow, type FoldRule, withBroadcast } from './rule.js';

interface Data { view: WeightView; map: ChannelMap; bias: Float64Array; form: 'scale-only' | 'gemm' | 'add' }

export const matmulConsumer: FoldRule<Data> = {
  name: 'matmul-consumer',
  op: 'MatMul',
  direction: 'into-consumer',
  match(ctx, run, layer) {
    const a = resolveRun(run, layer.rank, 0, layer.inChannels);
    if (isRefusal(a)) return a;
    const t = layer.weight.tensor;
    const weight = weightSource(t);
    const v = weightView(t.dims);
    const map = layouts.rows(v);
    const bias = contractShift(weight, v, map, 'b', layer.outChannels, a.shift);
    if (!fitsStorage(maxAbs(bias), t.dataType)) return overflow('bias', t.dataType);
    if (!fitsStorage(scaleWeights(weight, map, a.scale), t.dataType)) return overflow('weights', t.dataType);
    const form = !hasShift(a) ? 'scale-only' : layer.rank === 2 && ctx.opsetOf('') >= 11 ? 'gemm' : 'add';
    return { rule: matmulConsumer, run, layer, affine: a, adds: form === 'add' ? 1 : 0, data: { view: v, map, bias, form } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    const node = layer.node;
    const dt = layer.weight.tensor.dataType;
    scaleConstant(ctx, edit, node, 1, layer.weight, data.map, m.affine.scale);
    bypassRun(edit, layer, run);
    edit.regionOutputs = [node.outputs[0]!];
    if (data.form === 'gemm') {
      changeOf(edit, node).opType = 'Gemm';
      addConstantInput(ctx, edit, node, 2, biasName(layer), dt, data.bias, [data.bias.length]);
    } else if (data.form === 'add') {
      const out = node.outputs[0]!;
      const unbiased = freshName(ctx, `${out}.unbiased`);
      changeOf(edit, node).outputs[0] = unbiased;
      const bias = freshName(ctx, biasName(layer));
      edit.newInitializers.push(makeTensor(bias, [data.bias.length], dt, data.bias));
      edit.inserts.push({ node: withBroadcast(ctx, makeNode('Add', freshName(ctx, `${layer.label}.bias_add`), [unbiased, bias], [out])), after: node });
    }
  },
};
