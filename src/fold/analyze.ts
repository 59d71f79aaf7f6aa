// The one analysis audit and fold share: for every normalization, the run it belongs to, the rule that
// would fold it or the one reason it is kept. Audit stops here; fold rewrites the matches.
import type { Model, Node } from '../graph/ir.js';
import { makeContext, isRefusal, refuse, type FoldContext, type Refusal } from './context.js';
import { isLayer, readLayer } from './layers.js';
import { collectRun, isStep, stepOf, type Run, type StepCache } from './run.js';
import { isBatchNorm } from './steps.js';
import { buildScopes, isLinear, labelOf, type Scope } from './scope.js';
import { runtimeNorm } from './norms.js';
import { ruleFor, type RuleMatch } from './rules/index.js';
import type { Direction, Finding, FoldOptions, ReasonCode } from './types.js';

export type Outcome =
  | { kind: 'match'; match: RuleMatch }
  | { kind: 'kept'; reason: ReasonCode; hint: string; direction: Direction | null; target: string | null }
  | { kind: 'ignore' };

interface Side extends Refusal { direction: Direction; target: string }

const label = labelOf;

/** A fold must leave fewer nodes, unless it removes a BatchNormalization (a bias Add is cheaper than a norm). */
const worthIt = (m: RuleMatch) => m.run.hasBatchNorm || m.run.steps.length > m.adds;

function trySide(ctx: FoldContext, run: Run, n: Node, direction: Direction): RuleMatch | Side | 'no-gain' {
  const scope = run.scope;
  const side = (r: Refusal): Side => ({ ...r, direction, target: label(scope, n) });
  const layer = readLayer(ctx, scope, n);
  if (!isLayer(layer)) return side(layer);
  const rule = ruleFor(n.opType, direction);
  if (!rule) {
    return side(refuse('padded-consumer', `'${label(scope, n)}' is a ConvTranspose: its border outputs receive fewer kernel taps, so a shift cannot become its bias`));
  }
  const m = rule.match(ctx, run, layer);
  if (isRefusal(m)) return side(m);
  return worthIt(m) ? m : 'no-gain';
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

/** The outcome of a run: a match (producer side first), or the most telling refusal. */
export function assessRun(ctx: FoldContext, run: Run): Outcome {
  const scope = run.scope;
  const ud = scope.ud;
  let rp: Side | undefined;
  let rc: Side | undefined;
  let noGain = false;
  const p = ud.producer(run.top);
  if (p && isLinear(p) && !ctx.generated.has(p)) {
    const r = trySide(ctx, run, p, 'into-producer');
    if (r === 'no-gain') noGain = true;
    else if ('rule' in r) return { kind: 'match', match: r };
    else rp = r;
  }
  const readers = ud.consumers(run.bottom);
  const linear = readers.filter((n) => isLinear(n) && !ctx.generated.has(n));
  if (linear.length) {
    const c = linear[0]!;
    const side = (r: Refusal): Side => ({ ...r, direction: 'into-consumer', target: label(scope, c) });
    if (ud.isGraphOutput(run.bottom)) rc = side(refuse('graph-output', `its output is also a model output; read it only through '${label(scope, c)}'`));
    else if (readers.length > 1) rc = side(refuse('shared-output', `its output is read by ${readers.length} nodes; folding into '${label(scope, c)}' needs it to be the only reader`));
    else if (c.inputs[0] !== run.bottom || c.inputs.indexOf(run.bottom, 1) > 0) rc = side(refuse('no-linear-neighbour', `'${label(scope, c)}' reads it as a weight, not as its data input`));
    else {
      const r = trySide(ctx, run, c, 'into-consumer');
      if (r === 'no-gain') noGain = true;
      else if ('rule' in r) return { kind: 'match', match: r };
      else rc = r;
    }
  }
  if (!run.hasBatchNorm) {
    // A constant Mul/Add is only a normalization worth listing next to a layer it could fold into.
    if (noGain) return { kind: 'ignore' };
    const real = [rp, rc].filter((s): s is Side => s !== undefined && s.reason !== 'no-linear-neighbour');
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
      hint: `'${label(scope, between)}' (${between.opType}) sits between it and '${label(scope, beyond)}'; move the norm next to the layer`,
    };
  }
  return { kind: 'kept', reason: 'no-linear-neighbour', direction: null, target: null, hint: 'no Conv, ConvTranspose, Gemm or MatMul with constant weights writes its input or reads its output' };
}

/** What a foldable run's fold does, in one line. */
export function foldEffect(m: RuleMatch): string {
  const others = m.run.steps.length - 1;
  const withOthers = others ? ` together with ${others} neighbouring step${others > 1 ? 's' : ''}` : '';
  const bias = m.adds ? '; the shift becomes a bias Add' : (m.data as { form?: string }).form === 'gemm' ? '; the MatMul becomes a Gemm carrying the shift' : '';
  return `${m.rule.direction === 'into-producer' ? 'scales the output channels' : 'scales the input channels'} of '${m.layer.label}'${withOthers}${bias}`;
}

export type Summary = Omit<Finding, 'node' | 'op' | 'graph'>;

/** A finding's verdict without the match (which holds decoded weights and must not be kept around). */
export function summarize(o: Outcome): Summary {
  if (o.kind === 'match') {
    return { status: 'foldable', direction: o.match.rule.direction, target: o.match.layer.label, reason: null, hint: null, effect: foldEffect(o.match) };
  }
  const k = o as Extract<Outcome, { kind: 'kept' }>;
  return { status: 'kept', direction: k.direction, target: k.target, reason: k.reason, hint: k.hint, effect: null };
}

/** Every normalization of one graph with its verdict, in node order. */
export function* assessScope(ctx: FoldContext, scope: Scope, cache: StepCache): Generator<{ node: Node; op: string; summary: Summary }> {
  const runs = new Map<Node, Summary | undefined>();
  for (const n of scope.graph.nodes) {
    const rt = runtimeNorm(scope, n);
    if (rt) {
      yield { node: n, op: rt.op, summary: { status: 'kept', reason: 'runtime-statistics', hint: rt.hint, effect: null, direction: null, target: null } };
      continue;
    }
    const s = stepOf(ctx, scope, cache, n);
    if (s === undefined) continue;
    if (!isStep(s)) {
      // A refused step: always listed for a BatchNormalization, for a Mul/Add only beside a linear layer.
      const beside = n.inputs.some((i) => { const p = i ? scope.ud.producer(i) : undefined; return p !== undefined && isLinear(p); })
        || scope.ud.consumers(n.outputs[0] ?? '').some(isLinear);
      if (isBatchNorm(n) || beside || s.reason === 'kept-by-user' || s.reason === 'proof-failed') {
        yield { node: n, op: n.opType, summary: { status: 'kept', reason: s.reason, hint: s.hint, effect: null, direction: null, target: null } };
      }
      continue;
    }
    if (!runs.has(n)) {
      if (runs.size >= 512) runs.clear(); // a member met later just assesses its run again, with the same result
      const run = collectRun(ctx, scope, cache, s);
      const o = assessRun(ctx, run);
      const summary = o.kind === 'ignore' ? undefined : summarize(o);
      for (const m of run.steps) runs.set(m.node, summary);
    }
    const summary = runs.get(n);
    if (summary) yield { node: n, op: n.opType, summary };
  }
}

export function findingsOf(ctx: FoldContext, model: Model): Finding[] {
  const out: Finding[] = [];
  for (const scope of buildScopes(model, ctx.labels)) {
    for (const f of assessScope(ctx, scope, new Map())) out.push({ node: label(scope, f.node), op: f.op, ...f.summary, graph: scope.path });
  }
  return out;
}

/** Every normalization in the model and its subgraphs: foldable or kept, direction, target, reason, hint. */
export function analyze(model: Model, options: FoldOptions = {}): Finding[] {
  return findingsOf(makeContext(model, options), model);
}
