// Recognising the per-channel affine steps a fold can remove: an inference-mode BatchNormalization, or an
// Add/Sub/Mul/Div with a constant that varies along at most one axis. Each check is one named predicate so
// every reason a norm is kept reads in one place.
import type { Node } from '../graph/ir.js';
import { attrFloat, attrInt, elementCount } from '../graph/ir.js';
import { isFloatType, tensorToFloat64, dataTypeName } from '../graph/tensor.js';
import { batchNormAffine, channelAxisFromEnd, type Affine, type ElementwiseOp } from './affine.js';
import { constantOf, isDefaultDomain, rankOf, type ConstRef, type Scope } from './scope.js';
import { vectorInSlot } from './scratch-vectors.js';
import { refuse, type FoldContext, type Refusal } from './context.js';
import type { EntryKind } from './types.js';

export interface AffineStep {
  node: Node;
  /** layer-norm: the learned scale and shift of a fused LayerNormalization (its statistics stay in place). */
  kind: 'batch-norm' | 'elementwise' | 'layer-norm';
  /** The activation the step reads, and the one it writes. */
  data: string;
  output: string;
  /** BatchNormalization: its map over axis 1; LayerNormalization: its Scale and B over the axis it normalizes. */
  bn?: Affine;
  /** LayerNormalization: its axis attribute as written (-1 when absent). */
  lnAxis?: number;
  /** Elementwise: the operation and its constant. */
  op?: ElementwiseOp;
  constOnLeft?: boolean;
  constDims?: number[];
  constValues?: Float64Array;
  consts: ConstRef[];
}

const ELEMENTWISE = new Set(['Add', 'Sub', 'Mul', 'Div']);

export function isBatchNorm(n: Node): boolean {
  return n.opType === 'BatchNormalization' && isDefaultDomain(n);
}

export function isLayerNorm(n: Node): boolean {
  return n.opType === 'LayerNormalization' && isDefaultDomain(n);
}

export function isElementwise(n: Node): boolean {
  return ELEMENTWISE.has(n.opType) && isDefaultDomain(n) && n.inputs.length === 2 && n.outputs.length === 1;
}

// ---- predicates ---------------------------------------------------------------------------------------

const keptByUser = (ctx: FoldContext, n: Node) => ctx.keep.size > 0 && (ctx.keep.has(n.name) || ctx.keep.has(ctx.labels.get(n) ?? n.name));
const proofFailed = (ctx: FoldContext, n: Node) => ctx.proofFailed.has(n);
const trainingMode = (n: Node) => attrInt(n, 'training_mode', 0) === 1 || hasExtraOutput(n);

function hasExtraOutput(n: Node): boolean {
  for (let i = 1; i < n.outputs.length; i++) if (n.outputs[i] !== '') return true;
  return false;
}
const perActivation = (n: Node) => attrInt(n, 'spatial', 1) === 0;
const overridable = (ctx: FoldContext, refs: ConstRef[]) => !ctx.allowOverridable && refs.some((r) => r.overridable);

/** The affine step a node is, a refusal saying why it cannot be folded, or undefined when it is no such step. */
export function readStep(ctx: FoldContext, scope: Scope, n: Node): AffineStep | Refusal | undefined {
  if (ctx.generated.has(n)) return undefined;
  if (isBatchNorm(n)) return readBatchNorm(ctx, scope, n);
  if (isElementwise(n)) return readElementwise(ctx, scope, n);
  if (isLayerNorm(n)) return readLayerNormTail(ctx, scope, n);
  return undefined;
}

/**
 * Whether a LayerNormalization's Scale or B of these dims is one value per feature of the last axis: [D], or
 * [1, ..., 1, D] of no more axes than the input (which broadcasts the same; more axes would add to the output's).
 */
export function perFeature(dims: readonly number[], inputRank: number | undefined): boolean {
  if (dims.length === 1) return true;
  return dims.length > 1 && inputRank !== undefined && dims.length <= inputRank && dims.slice(0, -1).every((d) => d === 1);
}

/**
 * The learned tail of a fused LayerNormalization (ONNX Operators, LayerNormalization, opset 17: Y = normalized
 * * Scale + B over the axes from `axis` on). Its statistics come from each input and stay; only Scale and B can
 * move into the readers. Undefined when there is nothing to move or it cannot be read as a per-feature vector.
 */
function readLayerNormTail(ctx: FoldContext, scope: Scope, n: Node): AffineStep | Refusal | undefined {
  if (ctx.opsetOf('') < 17 || hasExtraOutput(n)) return undefined;
  const [, sName, bName] = n.inputs;
  if (!sName) return undefined;
  const refs: ConstRef[] = [];
  for (const name of [sName, bName]) {
    if (!name) continue;
    const r = constantOf(scope, name);
    if (!r || !isFloatType(r.tensor.dataType) || !perFeature(r.tensor.dims, rankOf(scope, n.inputs[0]!))) return undefined;
    refs.push(r);
  }
  const c = elementCount(refs[0]!.tensor.dims);
  if (refs.some((r) => elementCount(r.tensor.dims) !== c)) return undefined;
  const scale = tensorToFloat64(refs[0]!.tensor);
  const shift = bName ? tensorToFloat64(refs[1]!.tensor) : new Float64Array(c);
  if (scale.every((v) => v === 1) && shift.every((v) => v === 0)) return undefined; // nothing left to move
  const user = userRefusal(ctx, n);
  if (user) return user;
  if (!finite(scale) || !finite(shift)) {
    return refuse('non-finite-params', 'its Scale or B holds NaN or an infinity, and a fold would write that into the readers\' weights; fix the exported parameters');
  }
  if (overridable(ctx, refs)) {
    const r = refs.find((x) => x.overridable)!;
    return refuse('overridable-weights', `'${r.name}' is also a graph input, so callers may replace it; remove it from the graph inputs in the export, or pass --allow-overridable if callers never do`);
  }
  const y = n.outputs[0]!;
  return { node: n, kind: 'layer-norm', data: y, output: y, bn: { scale, shift }, lnAxis: attrInt(n, 'axis', -1), consts: refs };
}

/**
 * Whether a node is a normalization (an operator, or a per-channel scale-and-shift by a constant vector) or
 * another constant affine step (a scalar constant): the line between listed-and-kept and "also folded".
 */
export function entryKind(scope: Scope, n: Node): EntryKind {
  if (!isElementwise(n)) return 'normalization';
  for (const v of n.inputs) {
    const r = v ? constantOf(scope, v) : undefined;
    if (r) return channelAxisFromEnd(r.tensor.dims) === null ? 'affine-step' : 'normalization';
  }
  return 'normalization';
}

/** Where the keep came from: the flag, or a config file the user can edit. */
function keptHint(ctx: FoldContext, n: Node): string {
  const origins = ctx.options.keepOrigins ?? {};
  const from = origins[n.name] ?? origins[ctx.labels.get(n) ?? n.name];
  return from === undefined || from.startsWith('--')
    ? 'named with --keep; drop that flag to fold it'
    : `listed under "keep" in ${from}; remove it there to fold it`;
}

/** Whether every value is a finite number (NaN, infinities and a zero variance's 1/0 are not). */
function finite(values: ArrayLike<number>): boolean {
  for (let i = 0; i < values.length; i++) if (!Number.isFinite(values[i]!)) return false;
  return true;
}

function userRefusal(ctx: FoldContext, n: Node): Refusal | undefined {
  if (keptByUser(ctx, n)) return refuse('kept-by-user', keptHint(ctx, n));
  if (proofFailed(ctx, n)) return refuse('proof-failed', 'the folded model did not match the original on the proof inputs; kept as it was');
  return undefined;
}

function readBatchNorm(ctx: FoldContext, scope: Scope, n: Node): AffineStep | Refusal {
  const user = userRefusal(ctx, n);
  if (user) return user;
  if (trainingMode(n)) return refuse('training-mode', 'export the model in inference mode (training_mode=0, only output Y)');
  if (perActivation(n)) return refuse('per-activation-stats', 'legacy spatial=0 form; re-export with per-channel statistics (spatial=1 or opset >= 9)');
  const ins = n.inputs;
  if (ins.length < 5 || !ins[1] || !ins[2] || !ins[3] || !ins[4]) return refuse('params-not-constant', 'scale, B, mean and var must all be given as initializers or Constant nodes');
  const refs = new Array<ConstRef>(4); // (sized once: an array grown by push holds room for 17)
  for (let k = 0; k < 4; k++) {
    const r = constantOf(scope, ins[k + 1]!);
    if (!r) return refuse('params-not-constant', `'${ins[k + 1]}' is computed at run time; store it as an initializer`);
    refs[k] = r;
  }
  if (overridable(ctx, refs)) {
    const r = refs.find((x) => x.overridable)!;
    return refuse('overridable-weights', `'${r.name}' is also a graph input, so callers may replace it; remove it from the graph inputs in the export, or pass --allow-overridable if callers never do`);
  }
  const bad = refs.find((r) => !isFloatType(r.tensor.dataType));
  if (bad) return refuse('dtype-unsupported', `'${bad.name}' is ${dataTypeName(bad.tensor.dataType)}; only float parameters fold exactly`);
  const c = elementCount(refs[0]!.tensor.dims);
  if (refs.some((r) => r.tensor.dims.length !== 1 || elementCount(r.tensor.dims) !== c)) {
    return refuse('axis-mismatch', 'scale, B, mean and var must each hold one value per channel');
  }
  // The parameters are read into reused scratch vectors: only the scale and shift made from them are kept.
  const bn = batchNormAffine(vectorInSlot(refs[0]!.tensor, 0), vectorInSlot(refs[1]!.tensor, 1), vectorInSlot(refs[2]!.tensor, 2), vectorInSlot(refs[3]!.tensor, 3), attrFloat(n, 'epsilon', 1e-5));
  if (!finite(bn.scale) || !finite(bn.shift)) {
    return refuse('non-finite-params', 'scale, B, mean or var holds NaN or an infinity, or var + epsilon is not above 0: the norm gives no finite number on some channel, and a fold would write that into the weights; fix the exported statistics');
  }
  return { node: n, kind: 'batch-norm', data: n.inputs[0]!, output: n.outputs[0]!, bn, consts: refs };
}

function readElementwise(ctx: FoldContext, scope: Scope, n: Node): AffineStep | Refusal | undefined {
  const [a, b] = n.inputs as [string, string];
  if (!a || !b) return undefined;
  const ca = constantOf(scope, a);
  const cb = constantOf(scope, b);
  if ((ca === undefined) === (cb === undefined)) return undefined; // both constant (plain constant folding) or neither
  const ref = (ca ?? cb)!;
  const constOnLeft = ca !== undefined;
  const op = n.opType as ElementwiseOp;
  if (op === 'Div' && constOnLeft) return undefined; // c / x is not affine in x
  // Before opset 7, broadcast=1 with an axis attribute aligned the constant to that axis, not to the end.
  if (n.attributes.some((a) => a.name === 'axis' || a.name === 'broadcast')) return undefined;
  if (!isFloatType(ref.tensor.dataType)) return undefined;
  if (channelAxisFromEnd(ref.tensor.dims) === undefined) return undefined; // varies along several axes
  const user = userRefusal(ctx, n);
  if (user) return user;
  if (overridable(ctx, [ref])) return refuse('overridable-weights', `'${ref.name}' is also a graph input, so callers may replace it; remove it from the graph inputs in the export, or pass --allow-overridable if callers never do`);
  const constValues = tensorToFloat64(ref.tensor);
  const byZero = op === 'Div' && constValues.includes(0);
  if (byZero || !finite(constValues)) {
    return refuse('non-finite-params', `'${ref.name}' ${byZero ? 'divides by zero' : 'holds NaN or an infinity'}: the step gives no finite number there, and a fold would write that into the weights; fix the exported constant`);
  }
  return {
    node: n, kind: 'elementwise', data: constOnLeft ? b : a, output: n.outputs[0]!, op, constOnLeft,
    constDims: [...ref.tensor.dims], constValues, consts: [ref],
  };
}
