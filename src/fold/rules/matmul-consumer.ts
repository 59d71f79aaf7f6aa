// Norm before a MatMul with a constant 2-D weight W [K, N], on the axis it contracts (the input's last):
// rows of W are scaled by s and t·W becomes a bias: added to the constant of the bias Add that already follows
// the MatMul (the usual export of a linear layer with bias), else the C of a Gemm when the input is 2-D, else a
// new Add.
import type { Node } from '../../graph/ir.js';
import { makeTensor } from '../../graph/tensor.js';
import { channelAxisFromEnd } from '../affine.js';
import type { Layer } from '../layers.js';
import type { Run } from '../run.js';
import { constantOf, isDefaultDomain, type ConstRef } from '../scope.js';
import { decodeValues, weightSource } from '../values.js';
import { hasShift } from '../affine.js';
import { addConstantInput, scaleConstant, changeOf, makeNode, replaceConstant } from '../apply.js';
import { freshName, isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import { contractShift, layouts, maxAbs, scaleWeights, weightView, type ChannelMap, type WeightView } from '../weights.js';
import { bypassRun, fitsStorage, overflow, type FoldRule, withBroadcast } from './rule.js';

interface BiasAdd { node: Node; index: number; ref: ConstRef }
interface Data { view: WeightView; map: ChannelMap; bias: Float64Array; form: 'scale-only' | 'bias-add' | 'gemm' | 'add'; biasAdd?: BiasAdd }

/** The Add of a constant [N] bias that alone reads the MatMul's output, if there is one. */
function followingBiasAdd(run: Run, layer: Layer): BiasAdd | undefined {
  const ud = run.scope.ud;
  const out = layer.node.outputs[0]!;
  const readers = ud.consumers(out);
  if (ud.isGraphOutput(out) || readers.length !== 1) return undefined;
  const a = readers[0]!;
  if (a.opType !== 'Add' || !isDefaultDomain(a) || a.inputs.length !== 2 || a.attributes.length || a.inputs[0] === a.inputs[1]) return undefined;
  const index = a.inputs[0] === out ? 1 : 0;
  const ref = constantOf(run.scope, a.inputs[index]!);
  if (!ref || ref.tensor.dataType !== layer.weight.tensor.dataType) return undefined;
  const dims = ref.tensor.dims;
  if (channelAxisFromEnd(dims) !== 0 || dims[dims.length - 1] !== layer.outChannels) return undefined;
  if (dims.length > (layer.rank ?? 1)) return undefined; // a longer constant would add axes
  return { node: a, index, ref };
}

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
    const biasAdd = hasShift(a) ? followingBiasAdd(run, layer) : undefined;
    if (biasAdd) {
      const c = decodeValues(biasAdd.ref.tensor);
      for (let i = 0; i < bias.length; i++) bias[i] += c[i]!;
      if (!fitsStorage(maxAbs(bias), t.dataType)) return overflow('bias', t.dataType);
    }
    const form = !hasShift(a) ? 'scale-only' : biasAdd ? 'bias-add' : layer.rank === 2 && ctx.opsetOf('') >= 11 ? 'gemm' : 'add';
    return { rule: matmulConsumer, run, layer, affine: a, adds: form === 'add' ? 1 : 0, data: { view: v, map, bias, form, biasAdd } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    const node = layer.node;
    const dt = layer.weight.tensor.dataType;
    scaleConstant(ctx, edit, node, 1, layer.weight, data.map, m.affine.scale);
    bypassRun(ctx, edit, layer, run);
    edit.regionOutputs = [node.outputs[0]!];
    if (data.form === 'bias-add') {
      const b = data.biasAdd!;
      replaceConstant(ctx, edit, b.node, b.index, b.ref, data.bias, b.ref.tensor.dims);
      changeOf(edit, b.node); // (in the proof region even when only its constant changes)
      edit.regionOutputs = [b.node.outputs[0]!];
    } else if (data.form === 'gemm') {
      changeOf(edit, node).opType = 'Gemm';
      addConstantInput(ctx, edit, node, 2, `${layer.weight.name}.bias`, dt, data.bias, [data.bias.length]);
    } else if (data.form === 'add') {
      const out = node.outputs[0]!;
      const unbiased = freshName(ctx, `${out}.unbiased`);
      changeOf(edit, node).outputs[0] = unbiased;
      const bias = freshName(ctx, `${layer.weight.name}.bias`);
      edit.newInitializers.push(makeTensor(bias, [data.bias.length], dt, data.bias));
      edit.inserts.push({ node: withBroadcast(ctx, makeNode('Add', freshName(ctx, `${layer.label}.bias_add`), [unbiased, bias], [out])), after: node });
    }
  },
};
