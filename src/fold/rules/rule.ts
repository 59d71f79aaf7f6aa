// The shape every fold rule has: the layer op it folds into and the direction (its anchor is always a run of
// affine steps), a match that checks every condition and returns a match or one refusal, and a rewrite that
// turns a match into an edit without deciding anything.
import type { DataTypeCode, Node, Tensor } from '../../graph/ir.js';
import { roundToStorage, dataTypeName, numberToHalfBits, numberToBfloatBits } from '../../graph/tensor.js';
import { DataType } from '../../graph/ir.js';
import type { Affine } from '../affine.js';
import type { Edit } from '../apply.js';
import { changeOf, replaceConstant } from '../apply.js';
import { refuse, type FoldContext, type Refusal } from '../context.js';
import type { Layer, LayerOp } from '../layers.js';
import type { Run } from '../run.js';
import type { Direction } from '../types.js';
import type { ChannelMap } from '../weights.js';
import { LateRangeCheckFailed, rangeCheckCanWait, scaledMaxAbs, type ScaleGuard } from '../values.js';

export interface RuleMatch<D = unknown> {
  rule: FoldRule<D>;
  run: Run;
  layer: Layer;
  affine: Affine;
  /** Nodes the fold adds (a bias Add): a run of elementwise steps only folds when it removes more than it adds. */
  adds: number;
  /** Rule-specific values computed while checking (new bias, decoded weight). */
  data: D;
}

export interface FoldRule<D = unknown> {
  name: string;
  op: LayerOp;
  direction: Direction;
  match(ctx: FoldContext, run: Run, layer: Layer): RuleMatch<D> | Refusal;
  rewrite(ctx: FoldContext, m: RuleMatch<D>, edit: Edit): void;
}

// ---- predicates shared by the rules -------------------------------------------------------------------

/**
 * Into the producer: the layer's output must reach nothing but the run, unless --clone-shared lets the norm
 * path take its own copy of the layer (then the driver clones it before the rewrite; see fold.ts).
 */
export function producerOutputFree(ctx: FoldContext, layer: Layer, run: Run): Refusal | undefined {
  const ud = run.scope.ud;
  const out = layer.node.outputs[0]!;
  if (layer.node.outputs.length !== 1) return refuse('shared-output', `'${layer.label}' has several outputs`);
  const norm = run.steps[0]!.node;
  const normName = norm.name || norm.opType;
  if (ud.isGraphOutput(out)) {
    if (ctx.options.cloneShared) return undefined;
    return refuse('graph-output', `the output of '${layer.label}' is also a model output, and a fold would change it; export the model so that the output is taken after '${normName}', or pass --clone-shared to give '${normName}' its own copy of '${layer.label}'`);
  }
  const readers = ud.consumers(out);
  if (readers.length === 1 && readers[0] === norm) return undefined;
  if (!readers.includes(norm)) return refuse('shared-output', `'${layer.label}' does not feed '${normName}' directly`);
  if (ctx.options.cloneShared) return undefined;
  const others = readers.filter((r) => r !== norm).map((r) => `'${r.name || r.opType}' (${r.opType})`);
  return refuse('shared-output', `the output of '${layer.label}' is also read by ${others.join(', ')}, which must keep the unscaled values; ` +
    `pass --clone-shared to give '${normName}' its own copy of '${layer.label}', or export the model with only the norm reading it`);
}

/** Into the producer: the layer's output has readers besides the run, or is a model output (the fold needs a --clone-shared copy). */
export function producerShared(layer: Layer, run: Run): boolean {
  const out = layer.node.outputs[0]!;
  const readers = run.scope.ud.consumers(out);
  return readers.length !== 1 || readers[0] !== run.steps[0]!.node || run.scope.ud.isGraphOutput(out);
}

/** A folded value fits the storage type when it rounds to a finite number there (float16 max 65504). */
export function fitsStorage(maxAbsValue: number, dataType: DataTypeCode): boolean {
  if (!(maxAbsValue >= 0)) return false;
  switch (dataType) {
    case DataType.DOUBLE: return Number.isFinite(maxAbsValue);
    case DataType.FLOAT: return Number.isFinite(Math.fround(maxAbsValue));
    case DataType.FLOAT16: return (numberToHalfBits(maxAbsValue) & 0x7c00) !== 0x7c00;
    case DataType.BFLOAT16: return (numberToBfloatBits(maxAbsValue) & 0x7f80) !== 0x7f80;
    default: return Number.isFinite(roundToStorage(Float64Array.of(maxAbsValue), dataType)[0]!);
  }
}

/**
 * The storage range check of scaling weight `t` by channel: a refusal when it would overflow; otherwise the
 * guard the scaling must run when the check was left to it (see rangeCheckCanWait), or undefined.
 */
export function weightRangeCheck(ctx: FoldContext, t: Tensor, map: ChannelMap, scale: Float64Array): Refusal | { guard?: ScaleGuard } {
  if (ctx.options.lateRangeCheck && rangeCheckCanWait(t)) {
    const dataType = t.dataType;
    return { guard: (m) => { if (!fitsStorage(m, dataType)) throw new LateRangeCheckFailed(t.name); } };
  }
  if (fitsStorage(scaledMaxAbs(t, map, scale), t.dataType)) return {};
  // (on this rare path only: were the weights already NaN or infinite, no wider type would help)
  if (!Number.isFinite(scaledMaxAbs(t, map, new Float64Array(scale.length).fill(1)))) {
    return refuse('non-finite-params', `the weight '${t.name}' holds NaN or an infinity, and a fold would spread it over the channel; fix the exported weights`);
  }
  return overflow('weights', t.dataType);
}

export function overflow(what: string, dataType: DataTypeCode): Refusal {
  return refuse('storage-overflow', `the folded ${what} would exceed the ${dataTypeName(dataType)} range; store the weights in a wider type`);
}

/** Into the producer: the layer now writes what the run's last step wrote; the run disappears. */
export function takeOverRun(ctx: FoldContext, edit: Edit, layer: Layer, run: Run, outputs = true): void {
  if (outputs) changeOf(edit, layer.node).outputs[0] = run.bottom;
  removeRun(ctx, edit, run);
  edit.goneValues.push(layer.node.outputs[0]!);
}

/**
 * The run's nodes go (once per edit, however many readers take it). A LayerNormalization's tail cannot go with
 * its node, whose statistics stay: its Scale becomes ones and its B is dropped.
 */
export function removeRun(ctx: FoldContext, edit: Edit, run: Run): void {
  if (edit.removedRuns.includes(run)) return;
  edit.removedRuns.push(run);
  for (const s of run.steps) {
    if (s.kind === 'layer-norm') {
      const scale = s.consts[0]!;
      replaceConstant(ctx, edit, s.node, 1, scale, new Float64Array(s.bn!.scale.length).fill(1), scale.tensor.dims);
      const c = changeOf(edit, s.node);
      if (c.inputs.length > 2) {
        c.inputs = c.inputs.slice(0, 2);
        edit.released.push(s.consts[1]!.name);
      }
      continue;
    }
    edit.removeNodes.push(s.node);
    if (s.output !== run.bottom) edit.goneValues.push(s.output);
    for (const c of s.consts) edit.released.push(c.name);
  }
}

/** Into the consumer: the layer reads what the run's first step read. */
export function bypassRun(ctx: FoldContext, edit: Edit, layer: Layer, run: Run): void {
  changeOf(edit, layer.node).inputs[0] = run.top;
  removeRun(ctx, edit, run);
  if (run.steps[run.steps.length - 1]!.kind !== 'layer-norm') edit.goneValues.push(run.bottom);
}

export function labelOf(n: Node): string {
  return n.name || n.opType;
}

/** Before opset 7 an Add broadcasts only with broadcast=1 (then the bias matches trailing axes). */
export function withBroadcast(ctx: FoldContext, n: Node): Node {
  if (ctx.opsetOf('') < 7) n.attributes.push({ name: 'broadcast', value: { type: 'INT', i: 1 }, docString: '', refAttrName: '', extra: [] });
  return n;
}

/** The name of a bias pleat creates for a layer: `<layer>.bias` (named after the weight when the layer has no name). */
export function biasName(layer: Layer): string {
  return `${layer.node.name || layer.weight.name}.bias`;
}
