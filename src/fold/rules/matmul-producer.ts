// Norm after a MatMul with a constant 2-D weight W [K, N], when the norm's channel axis is the output's last
// axis: W' = W ⊙ s along columns. A shift t becomes the C of a Gemm when the input is 2-D, else a new Add.
import { makeTensor } from '../../graph/tensor.js';
import type { ScaleGuard } from '../values.js';
import { hasShift } from '../affine.js';
import { addConstantInput, scaleConstant, changeOf, makeNode } from '../apply.js';
import { freshName, isRefusal } from '../context.js';
import { resolveRun } from '../run.js';
import { layouts, maxAbs, weightView, type ChannelMap } from '../weights.js';
import { biasName, fitsStorage, overflow, producerOutputFree, removeRun, takeOverRun, type FoldRule, weightRangeCheck, withBroadcast } from './rule.js';

interface Data { map: ChannelMap; guard?: ScaleGuard; shift: Float64Array; form: 'scale-only' | 'gemm' | 'add' }

export const matmulProducer: FoldRule<Data> = {
  name: 'matmul-producer',
  op: 'MatMul',
  direction: 'into-producer',
  match(ctx, run, layer) {
    const busy = producerOutputFree(ctx, layer, run);
    if (busy) return busy;
    const a = resolveRun(run, layer.rank, 0, layer.outChannels);
    if (isRefusal(a)) return a;
    const t = layer.weight.tensor;
    const v = weightView(t.dims);
    const map = layouts.columns(v);
    const range = weightRangeCheck(ctx, t, map, a.scale);
    if (isRefusal(range)) return range;
    if (!fitsStorage(maxAbs(a.shift), t.dataType)) return overflow('bias', t.dataType);
    const form = !hasShift(a) ? 'scale-only' : layer.rank === 2 && ctx.opsetOf('') >= 11 ? 'gemm' : 'add';
    return { rule: matmulProducer, run, layer, affine: a, adds: form === 'add' ? 1 : 0, data: { map, guard: range.guard, shift: a.shift, form } };
  },
  rewrite(ctx, m, edit) {
    const { layer, run, data } = m;
    const node = layer.node;
    const dt = layer.weight.tensor.dataType;
    scaleConstant(ctx, edit, node, 1, layer.weight, data.map, m.affine.scale, data.guard);
    edit.regionOutputs = [run.bottom];
    if (data.form === 'add') {
      // the MatMul keeps its wiring but not its weight: it belongs to the proof's region (left out, the region
      // compared s*t0 + t with t0 + t' and refused every such fold, while --unproven applied it)
      changeOf(edit, node);
      const bias = freshName(ctx, biasName(layer));
      edit.newInitializers.push(makeTensor(bias, [data.shift.length], dt, data.shift));
      edit.inserts.push({ node: withBroadcast(ctx, makeNode('Add', freshName(ctx, `${layer.label}.bias_add`), [node.outputs[0]!, bias], [run.bottom])), after: node });
      removeRun(ctx, edit, run);
      return;
    }
    if (data.form === 'gemm') {
      changeOf(edit, node).opType = 'Gemm';
      addConstantInput(ctx, edit, node, 2, biasName(layer), dt, data.shift, [data.shift.length]);
    }
    takeOverRun(ctx, edit, layer, run);
  },
};

