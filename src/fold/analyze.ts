// The one analysis audit and fold share: for every normalization, the run it belongs to, the rule that
// would fold it or the one reason it is kept. Audit stops here; fold rewrites the matches.
import type { Model, Node } from '../graph/ir.js';
import { makeContext, isRefusal, refuse, type FoldContext, type Refusal } from './context.js';
import { isLayer, readLayer } from './layers.js';
import { collectRun, isStep, stepOf, type Run, type StepCache } from './run.js';
import { entryKind, isBatchNorm, isLayerNorm, type AffineStep } from './steps.js';
import { buildScopes, constantOf, isLinear, labelOf, type Scope } from './scope.js';
import { runtimeNorm, writtenOutNorm } from './norms.js';
import { ruleFor, type RuleMatch } from './rules/index.js';
import { producerShared } from './rules/rule.js';
import { tensorByteSize } from '../graph/tensor.js';
import type { Direction, EntryKind, Finding, FoldOptions, ReasonCode } from './types.js';

export type Outcome =
  | { kind: 'match'; matches: RuleMatch[]; clone: boolean }
  | { kind: 'kept'; reason: ReasonCode; hint: string; direction: Direction | null; target: string | null }
  | { kind: 'ignore' };

interface Side extends Refusal { direction: Direction; target: string }

const label = labelOf;

/** A fold must leave fewer nodes, unless it removes a normalization operator (a bias Add is cheaper than a norm). */
const worthIt = (run: Run, ms: RuleMatch[]) => run.hasNormOp || run.steps.length > ms.reduce((a, m) => a + m.adds, 0);

const isMatch = (x: RuleMatch | Side): x is RuleMatch => 'rule' in x;

const sideOf = (r: Refusal, direction: Direction, scope: Scope, n: Node): Side => ({ ...r, direction, target: label(scope, n) });

function trySide(ctx: FoldContext, run: Run, n: Node, direction: Direction): RuleMatch | Side {
  const scope = run.scope;
  const layer = readLayer(ctx, scope, n);
  if (!isLayer(layer)) return sideOf(layer, direction, scope, n);
  const rule = ruleFor(n.opType, direction);
  if (!rule) {
    return sideOf(refuse('padded-consumer', `'${label(scope, n)}' is a ConvTranspose: its border outputs receive fewer kernel taps, so a shift cannot become its bias`), direction, scope, n);
  }
  const m = rule.match(ctx, run, layer);
  return isRefusal(m) ? sideOf(m, direction, scope, n) : m;
}

/** The reader of the run's output that cannot take the fold whatever its weights (not a linear layer), if any. */
function unsuitableReader(ctx: FoldContext, run: Run, readers: Node[]): Refusal & { node: Node } | undefined {
  const scope = run.scope;
  for (const r of readers) {
    const name = label(scope, r);
    if (!isLinear(r) || ctx.generated.has(r)) {
      return { node: r, ...refuse('shared-output', `'${name}' (${r.opType}) also reads its output and is no linear layer that could take the fold; it needs the values as they are, so the norm stays for it`) };
    }
    if (r.inputs[0] !== run.bottom || r.inputs.indexOf(run.bottom, 1) > 0) {
      const refusal = refuse('no-linear-neighbour', `'${name}' reads its output as a weight, not as its data input, so it cannot take the fold`);
      // (a MatMul or Gemm whose first operand is the constant: a layer with weights, in a form no rule takes)
      const held = r.inputs[0] !== run.bottom && r.inputs[0] !== undefined && constantOf(scope, r.inputs[0]) !== undefined;
      return { node: r, ...refusal, ...(held ? { heldWeights: true as const } : {}) };
    }
  }
  return undefined;
}

/** Walks a few nodes away from the run looking for a linear layer behind a non-affine node. */
function linearBeyond(scope: Scope, start: Node | undefined, up: boolean): Node | undefined {
  let n = start;
  for (let k = 0; n && k < 4; k++) {
    if (isLinear(n)) return n;
    if (up) n = n.inputs[0] ? scope.ud.producer(n.inputs[0]) : undefined;
    else {
      const cs = n.outputs[0] ? scope.ud.consumers(n.outputs[0]) : [];
      n = cs.length === 1 ? cs[0] : undefined;
    }
  }
  return undefined;
}

/**
 * The outcome of a run: a match (producer side first; on the consumer side, one match per reader, since every
 * reader must take the fold for the norm to go), or the most telling refusal.
 */
export function assessRun(ctx: FoldContext, run: Run): Outcome {
  const scope = run.scope;
  const ud = scope.ud;
  let rp: Side | undefined;
  let rc: Side | undefined;
  let noGain = false;
  const p = ud.producer(run.top);
  if (p && isLinear(p) && !ctx.generated.has(p)) {
    const r = trySide(ctx, run, p, 'into-producer');
    if (!isMatch(r)) rp = r;
    else if (worthIt(run, [r])) return { kind: 'match', matches: [r], clone: producerShared(r.layer, run) };
    else noGain = true;
  }
  const readers = ud.consumers(run.bottom);
  const linear = readers.filter((n) => isLinear(n) && !ctx.generated.has(n));
  if (linear.length) {
    const side = (n: Node, r: Refusal): Side => ({ ...r, direction: 'into-consumer', target: label(scope, n) });
    const odd = unsuitableReader(ctx, run, readers);
    if (ud.isGraphOutput(run.bottom)) {
      rc = side(linear[0]!, refuse('graph-output', `its output is also a model output, which must keep the values as they are; export the model so that the output is taken before the norm or after '${label(scope, linear[0]!)}'`));
    } else if (odd) rc = side(odd.node, odd);
    else {
      const ms: RuleMatch[] = [];
      for (const c of linear) {
        const r = trySide(ctx, run, c, 'into-consumer');
        if (!isMatch(r)) { rc = linear.length > 1 ? { ...r, hint: `${r.hint} (one of ${linear.length} readers; every reader must take the fold)` } : r; break; }
        ms.push(r);
      }
      if (!rc) {
        if (worthIt(run, ms)) return { kind: 'match', matches: ms, clone: false };
        noGain = true;
      }
    }
  }
  if (!run.hasNormOp) {
    // A constant Mul/Add is only a normalization worth listing next to a layer it could fold into, or one that
    // holds constant weights in a form no rule takes (listed as kept, so no per-channel step goes unmentioned).
    if (noGain) return { kind: 'ignore' };
    const real = [rp, rc].filter((s): s is Side => s !== undefined && (s.reason !== 'no-linear-neighbour' || s.heldWeights === true));
    if (!real.length) return { kind: 'ignore' };
    const s = real[0]!;
    return { kind: 'kept', reason: s.reason, hint: s.hint, direction: s.direction, target: s.target };
  }
  if (rp || rc) {
    const s = rp && rc && rp.reason === 'no-linear-neighbour' && rc.reason !== 'no-linear-neighbour' ? rc : (rp ?? rc)!;
    return { kind: 'kept', reason: s.reason, hint: s.hint, direction: s.direction, target: s.target };
  }
  const up = p ? linearBeyond(scope, p, true) : undefined;
  const down = readers.map((n) => linearBeyond(scope, n, false)).find((n) => n !== undefined);
  const beyond = up ?? down;
  if (beyond) {
    const between = up ? p! : readers.find((n) => linearBeyond(scope, n, false))!;
    return {
      kind: 'kept', reason: 'nonlinear-between', direction: null, target: label(scope, beyond),
      hint: `'${label(scope, between)}' (${between.opType}) sits between it and '${label(scope, beyond)}'; move the norm next to the layer in the exported model`,
    };
  }
  return { kind: 'kept', reason: 'no-linear-neighbour', direction: null, target: null, hint: 'no Conv, ConvTranspose, Gemm or MatMul with constant weights writes its input or reads its output' };
}

/** 'a', 'a' and 'b', 'a', 'b' and 'c'. */
export function nameList(names: readonly string[]): string {
  if (names.length <= 1) return names.length ? `'${names[0]}'` : ''; // (most lists: one per foldable norm)
  const q = names.map((n) => `'${n}'`);
  return `${q.slice(0, -1).join(', ')} and ${q[q.length - 1]}`;
}

/** Weight bytes a --clone-shared copy of the match's layer adds. */
export function cloneCost(m: RuleMatch): number {
  return tensorByteSize(m.layer.weight.tensor) + (m.layer.bias ? tensorByteSize(m.layer.bias.tensor) : 0);
}

/** The hint of a LayerNormalization whose scale and shift move into its readers. */
export const layerNormHint = (targets: readonly string[]) =>
  `statistics stay (computed from each input); its learned scale and shift move into ${nameList(targets)}, leaving Scale at ones and no B`;

/** The hint of a normalization written out as primitive ops whose per-feature Mul/Add moves into its readers. */
export const writtenOutHint = (targets: readonly string[]) =>
  `statistics stay (computed from each input, written as primitive ops); the learned scale and shift after it move into ${nameList(targets)}`;

/** What a foldable run's fold does, in one line (`targets`: the matches' layer labels, when already listed). */
export function foldHint(ms: RuleMatch[], clone: boolean, targets = ms.map((x) => x.layer.label)): string {
  const m = ms[0]!;
  const others = m.run.steps.length - 1;
  const withOthers = others ? ` together with ${others} neighbouring step${others > 1 ? 's' : ''}` : '';
  const form = (f: string) => ms.some((x) => (x.data as { form?: string }).form === f);
  const bias = ms.some((x) => x.adds) ? '; the shift becomes a bias Add'
    : form('bias-add') ? '; the shift joins the bias Add that follows'
      : form('gemm') ? '; the MatMul becomes a Gemm carrying the shift' : '';
  const copy = clone ? `, a copy of it made for this norm (+${cloneCost(m)} bytes of weights; its other readers keep the original)` : '';
  const each = ms.length > 1 ? ', each with its own copy of the scale and its own bias' : '';
  return `${m.rule.direction === 'into-producer' ? 'scales the output channels' : 'scales the input channels'} of ${nameList(targets)}${copy}${each}${withOthers}${bias}`;
}

export type Summary = Omit<Finding, 'node' | 'op' | 'graph' | 'kind'>;

/** A finding's verdict without the match (which holds decoded weights and must not be kept around). */
export function summarize(o: Outcome): Summary {
  if (o.kind === 'match') {
    const targets = o.matches.map((m) => m.layer.label);
    return {
      status: 'foldable', direction: o.matches[0]!.rule.direction, target: targets.join(', '), targets, reason: null,
      hint: null, effect: foldHint(o.matches, o.clone, targets), cloneBytes: o.clone ? cloneCost(o.matches[0]!) : 0,
    };
  }
  const k = o as Extract<Outcome, { kind: 'kept' }>;
  return { status: 'kept', direction: k.direction, target: k.target, targets: k.target ? [k.target] : [], reason: k.reason, hint: k.hint, effect: null, cloneBytes: 0 };
}

const keptSummary = (reason: ReasonCode, hint: string): Summary => ({ status: 'kept', reason, hint, effect: null, direction: null, target: null, targets: [], cloneBytes: 0 });

/**
 * A LayerNormalization whose tail found no linear layer to move into is kept for its statistics, as any
 * runtime-statistics norm, with the refusal's words as the hint.
 */
function layerNormKept(s: Summary): Summary {
  if (s.status !== 'kept' || (s.reason !== 'no-linear-neighbour' && s.reason !== 'nonlinear-between')) return s;
  const why = s.reason === 'nonlinear-between' ? s.hint : 'no Conv, Gemm or MatMul with constant weights reads its output';
  return keptSummary('runtime-statistics', `statistics come from each input and always stay; its learned scale and shift have nowhere to move: ${why}`);
}

/**
 * A finding: the node, then its summary's fields in the summary's own order (the JSON report prints them in that
 * order), then the graph. A foldable summary always has summarize's order and is written out field by field (a
 * spread between other fields copies property by property, and audit makes one finding per norm); a kept one
 * may have keptSummary's order and is spread.
 */
function findingOf(node: string, op: string, kind: EntryKind, s: Summary, graph: string): Finding {
  if (s.status === 'foldable') {
    return { node, op, kind, status: s.status, direction: s.direction, target: s.target, targets: s.targets, reason: s.reason, hint: s.hint, effect: s.effect, cloneBytes: s.cloneBytes, graph };
  }
  return { node, op, kind, ...s, graph };
}

/** Every normalization of one graph with its verdict, in node order, added to `out`. */
function assessScope(ctx: FoldContext, scope: Scope, cache: StepCache, out: Finding[]): void {
  const runs = new Map<Node, Summary | undefined>();
  const runSummary = (s: AffineStep): Summary | undefined => {
    if (!runs.has(s.node)) {
      if (runs.size >= 512) runs.clear(); // a member met later just assesses its run again, with the same result
      const run = collectRun(ctx, scope, cache, s);
      const o = assessRun(ctx, run);
      const summary = o.kind === 'ignore' ? undefined : summarize(o);
      for (const m of run.steps) runs.set(m.node, summary);
    }
    return runs.get(s.node);
  };
  const add = (n: Node, op: string, kind: EntryKind, summary: Summary) => { out.push(findingOf(label(scope, n), op, kind, summary, scope.path)); };
  for (const n of scope.graph.nodes) {
    const s = stepOf(ctx, scope, cache, n);
    if (s === undefined) {
      const rt = runtimeNorm(scope, n);
      if (!rt) continue;
      add(n, rt.op, 'normalization', writtenOutSummary(ctx, scope, cache, n, runSummary) ?? keptSummary('runtime-statistics', rt.hint));
      continue;
    }
    const kind = entryKind(scope, n);
    if (!isStep(s)) {
      // A refused step: always listed for a normalization operator, for a Mul/Add only beside a linear layer.
      const beside = n.inputs.some((i) => { const p = i ? scope.ud.producer(i) : undefined; return p !== undefined && isLinear(p); })
        || scope.ud.consumers(n.outputs[0] ?? '').some(isLinear);
      if (kind === 'normalization' && (isBatchNorm(n) || isLayerNorm(n) || beside || s.reason === 'kept-by-user' || s.reason === 'proof-failed')) {
        add(n, n.opType, kind, keptSummary(s.reason, s.hint));
      }
      continue;
    }
    let summary = runSummary(s);
    if (!summary) continue;
    if (s.kind === 'layer-norm') summary = summary.status === 'kept' ? layerNormKept(summary) : { ...summary, effect: layerNormHint(summary.targets) };
    // Other constant affine steps are never listed as kept (they are listed when folded, as "also folded").
    if (kind === 'affine-step' && summary.status === 'kept') continue;
    add(n, n.opType, kind, summary);
  }
}

/** A written-out layer norm or RMSNorm whose per-feature Mul/Add tail would move into the readers: foldable. */
function writtenOutSummary(ctx: FoldContext, scope: Scope, cache: StepCache, n: Node, runSummary: (s: AffineStep) => Summary | undefined): Summary | undefined {
  if (!writtenOutNorm(scope, n)) return undefined;
  const out = n.outputs[0]!;
  const readers = scope.ud.consumers(out);
  if (readers.length !== 1 || scope.ud.isGraphOutput(out)) return undefined;
  const t = stepOf(ctx, scope, cache, readers[0]!);
  if (!isStep(t) || t.data !== out || entryKind(scope, t.node) !== 'normalization') return undefined;
  const summary = runSummary(t);
  if (summary?.status !== 'foldable') return undefined;
  return { ...summary, effect: writtenOutHint(summary.targets), cloneBytes: 0 };
}

/** `scopes`: the fold driver's own (current, derived caches forgotten), else built here. */
export function findingsOf(ctx: FoldContext, model: Model, scopes = buildScopes(model, ctx.labels, ctx.options.inputShapes)): Finding[] {
  const out: Finding[] = [];
  for (const scope of scopes) assessScope(ctx, scope, new Map(), out);
  return out;
}

/** Every normalization in the model and its subgraphs: foldable or kept, direction, target, reason, hint. */
export function analyze(model: Model, options: FoldOptions = {}): Finding[] {
  return findingsOf(makeContext(model, options), model);
}
