// A run: the longest chain of foldable affine steps around a normalization (a norm feeding a norm, a bias
// Add then a norm, Mul then Add). Every member sees the same run, so every member gets the same outcome
// whichever one the analysis starts from, and audit and fold cannot disagree.
import type { Node } from '../graph/ir.js';
import { channelAxisFromEnd, composeAffine, elementwiseAffine, broadcastAffine, fitsChannelAxis, type Affine } from './affine.js';
import { writtenOutNorm } from './norms.js';
import { readStep, type AffineStep } from './steps.js';
import { refuse, type FoldContext, type Refusal } from './context.js';
import type { Scope } from './scope.js';

export interface Run {
  scope: Scope;
  /** Steps in data-flow order. */
  steps: AffineStep[];
  /** The activation the first step reads, and the one the last step writes. */
  top: string;
  bottom: string;
  /** A normalization operator (BatchNormalization, a LayerNormalization's tail, or the Mul/Add right after a
   * written-out layer norm or RMSNorm) is part of the run: its fold is worth it even when the shift needs a new
   * bias Add. */
  hasNormOp: boolean;
}

/** Per-pass cache of readStep, which decodes tensors (NO_STEP: the node is none). */
export type StepCache = Map<Node, AffineStep | Refusal | typeof NO_STEP>;

/** What the cache holds for a node that is no step (so one look-up answers, found or not). */
const NO_STEP = null;

/**
 * Entries kept before the cache starts over: runs are local (a step is asked for again by its neighbours, a few
 * nodes away), and whatever the cache holds when the collector runs is copied: at 512 entries most of the steps of
 * a long chain of small folds were.
 */
const CACHE_MAX = 32;

/** The op types readStep can make a step of (any other node is none, with nothing to cache). */
const STEP_OPS = new Set(['BatchNormalization', 'LayerNormalization', 'Add', 'Sub', 'Mul', 'Div']);

/** Whether readStep could make a step of the node (a cheap look at its op type; most nodes are no step). */
export function mayBeStep(n: Node): boolean {
  return STEP_OPS.has(n.opType);
}

export function stepOf(ctx: FoldContext, scope: Scope, cache: StepCache, n: Node): AffineStep | Refusal | undefined {
  if (!STEP_OPS.has(n.opType)) return undefined;
  const known = cache.get(n);
  if (known !== undefined) return known === NO_STEP ? undefined : known;
  if (cache.size >= CACHE_MAX) cache.clear();
  const s = readStep(ctx, scope, n);
  cache.set(n, s ?? NO_STEP);
  return s;
}

export const isStep = (x: AffineStep | Refusal | undefined): x is AffineStep => x !== undefined && 'kind' in x;

/** The run containing a step: extended upward and downward through steps whose output has exactly one reader. */
export function collectRun(ctx: FoldContext, scope: Scope, cache: StepCache, anchor: AffineStep): Run {
  const steps = [anchor];
  const single = (v: string, reader: Node) => {
    const cs = scope.ud.consumers(v);
    return cs.length === 1 && cs[0] === reader && !scope.ud.isGraphOutput(v);
  };
  for (let cur = anchor; ;) {
    const p = scope.ud.producer(cur.data);
    if (!p) break;
    const s = stepOf(ctx, scope, cache, p);
    if (!isStep(s) || !single(s.output, cur.node) || steps.includes(s)) break;
    steps.unshift(s);
    cur = s;
  }
  for (let cur = anchor; ;) {
    const cs = scope.ud.consumers(cur.output);
    if (cs.length !== 1 || scope.ud.isGraphOutput(cur.output)) break;
    const s = stepOf(ctx, scope, cache, cs[0]!);
    if (!isStep(s) || s.data !== cur.output || steps.includes(s)) break;
    steps.push(s);
    cur = s;
  }
  return {
    scope, steps, top: steps[0]!.data, bottom: steps[steps.length - 1]!.output,
    hasNormOp: steps.some((s) => s.kind !== 'elementwise') || tailOfWrittenOutNorm(scope, steps[0]!),
  };
}

/** The per-feature scale-and-shift right after a layer norm or RMSNorm written out as primitive ops. */
function tailOfWrittenOutNorm(scope: Scope, first: AffineStep): boolean {
  const p = scope.ud.producer(first.data);
  return p !== undefined && first.kind === 'elementwise' && writtenOutNorm(scope, p) !== undefined && channelAxisFromEnd(first.constDims!) !== null;
}

/**
 * The run as one affine map on a layer's channel axis: `rank` is the activation's rank (undefined when
 * unknown), `axisFromEnd` the layer's channel axis counted from the last axis, `channels` its channel count.
 */
export function resolveRun(run: Run, rank: number | undefined, axisFromEnd: number, channels: number): Affine | Refusal {
  let acc: Affine | undefined;
  for (const s of run.steps) {
    let a: Affine | undefined;
    const who = `'${s.node.name || s.node.opType}'`;
    if (s.kind === 'batch-norm') {
      if (rank === undefined) return refuse('axis-mismatch', `the rank at ${who} is not declared and cannot be worked out from the model's input shapes; add value_info for its input (or give --shape when a model input's shape is not declared) so its axis can be checked`);
      if (rank - 2 !== axisFromEnd) return refuse('axis-mismatch', `${who} normalizes axis 1 but the layer's channel axis is ${rank - 1 - axisFromEnd}`);
      if (s.bn!.scale.length !== channels) return refuse('axis-mismatch', `${who} has ${s.bn!.scale.length} channels, the layer ${channels}`);
      a = s.bn!;
    } else if (s.kind === 'layer-norm') {
      const axis = s.lnAxis!;
      if (axis !== -1) {
        if (rank === undefined) return refuse('axis-mismatch', `the rank at ${who} is not declared and cannot be worked out from the model's input shapes; add value_info for its input (or give --shape when a model input's shape is not declared) so its axis can be checked`);
        if (axis !== rank - 1) return refuse('axis-mismatch', `${who} normalizes from axis ${axis}, but its Scale and B must sit on the last axis, the one the layer reads as its features`);
      }
      if (axisFromEnd !== 0) return refuse('axis-mismatch', `${who} scales the last axis but the layer's channel axis is ${rank === undefined ? `${axisFromEnd} from the end` : rank - 1 - axisFromEnd}`);
      if (s.bn!.scale.length !== channels) return refuse('axis-mismatch', `${who} has ${s.bn!.scale.length} features, the layer reads ${channels}`);
      a = s.bn!;
    } else {
      if (!fitsChannelAxis(s.constDims!, rank, axisFromEnd, channels)) {
        return refuse('axis-mismatch', `the constant of ${who} [${s.constDims!.join(',')}] is not per-channel on the layer's channel axis`);
      }
      a = broadcastAffine(elementwiseAffine(s.op!, s.constOnLeft!, s.constValues!)!, channels);
    }
    acc = acc ? composeAffine(acc, a) : a;
  }
  return acc!;
}
