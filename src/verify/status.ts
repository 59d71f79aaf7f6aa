// The rules one check status follows wherever a comparison runs (compare, and fold's whole-model check):
// `passed` only when at least one probe compared at least one element of every output, `failed` when any output
// failed, `skipped` (with a reason code) when something could not be compared at all. Also which rewritten nodes
// sit upstream of each output, for coverage and for saying when a change was not observable at an output.
import { hasSubgraphs, subgraphsOf, type Graph, type Node } from '../graph/ir.js';
import { planOf } from '../eval/plan.js';

export type CheckStatus = 'passed' | 'failed' | 'skipped';

/**
 * Why a check compared nothing (or not every output):
 * - `no-shape`: an input's shape is unknown and no flag sets it;
 * - `no-kernel`: the evaluator has no kernel for an operator (or attribute value) of the model;
 * - `random-op`: the model draws random numbers (Bernoulli, RandomNormal, ...), so two runs cannot be compared;
 * - `no-elements`: an output had no elements on any probe, or none that is a finite number in both models (NaN
 *   or infinite throughout: those agree but compare nothing), or the model has no outputs;
 * - `wide-integers`: an int64/uint64 output held a value at or beyond 2^53, which the float64 evaluator may have
 *   rounded (src/verify/wide-integers.ts), so that output was not compared.
 */
export type SkipReason = 'no-shape' | 'no-kernel' | 'random-op' | 'no-elements' | 'wide-integers';

/** An output status that compared nothing there, so the check is skipped (not failed) for it. */
export function outputSkipped(status: string): boolean {
  return status === 'empty' || status === 'wide-integers';
}

/** The skip reason an output status gives (for outputs that outputSkipped says compared nothing). */
export function outputSkipReason(status: string): SkipReason {
  return status === 'wide-integers' ? 'wide-integers' : 'no-elements';
}

export interface SkipInfo {
  reason: SkipReason;
  message: string;
}

/** Which watched (rewritten) nodes the probes executed. */
export interface Coverage {
  executed: number;
  total: number;
  /** Names of watched nodes no probe executed. */
  missed: string[];
  /** Probes drawn beyond those asked for, because some watched node had not run yet. */
  extraProbes: number;
}

/** The status of a comparison from its outputs' results. */
export function checkStatus(outputs: ReadonlyArray<{ name: string; status: string; passed: boolean; metrics?: { count: number } }>): { status: CheckStatus; skipped: SkipInfo | null } {
  if (outputs.some((o) => !o.passed && !outputSkipped(o.status))) return { status: 'failed', skipped: null };
  if (outputs.length === 0) return { status: 'skipped', skipped: { reason: 'no-elements', message: 'the model has no outputs, so nothing was compared' } };
  const empty = outputs.filter((o) => o.status === 'empty');
  const wide = outputs.filter((o) => o.status === 'wide-integers').map((o) => `'${o.name}'`);
  if (empty.length || wide.length) {
    // (an empty output with elements had none that was a finite number in both models)
    const none = empty.filter((o) => !o.metrics || o.metrics.count === 0).map((o) => `'${o.name}'`);
    const nonFinite = empty.filter((o) => o.metrics && o.metrics.count > 0).map((o) => `'${o.name}'`);
    const parts = [
      ...(none.length ? [`output ${none.join(', ')} had no elements on any probe`] : []),
      ...(nonFinite.length ? [`output ${nonFinite.join(', ')} had no element that is a finite number in both models on any probe (NaN or infinite throughout)`] : []),
      ...(wide.length ? [`output ${wide.join(', ')} held an integer at or beyond 2^53, which float64 may have rounded`] : []),
    ];
    return { status: 'skipped', skipped: { reason: empty.length ? 'no-elements' : 'wide-integers', message: `${parts.join('; ')}, so nothing was compared there` } };
  }
  return { status: 'passed', skipped: null };
}

export function missedNodes(watch: ReadonlyMap<Node, string>, executed: ReadonlySet<Node>): string[] {
  return [...watch].filter(([n]) => !executed.has(n)).map(([, name]) => name);
}

/** Every value a node reads, including what its bodies read from enclosing scopes. */
function readsOf(n: Node): string[] {
  const out = new Set(n.inputs.filter((x) => x !== ''));
  const visit = (g: Graph) => {
    const defined = new Set([...g.inputs.map((i) => i.name), ...g.initializers.map((t) => t.name)]);
    for (const m of g.nodes) {
      for (const i of m.inputs) if (i && !defined.has(i)) out.add(i);
      for (const sg of subgraphsOf(m)) visit(sg);
      for (const o of m.outputs) if (o) defined.add(o);
    }
    for (const o of g.outputs) if (!defined.has(o.name)) out.add(o.name);
  };
  for (const g of subgraphsOf(n)) visit(g);
  return [...out];
}

/** Watched nodes in a node's bodies, at any depth. */
function nestedWatched(n: Node, watch: ReadonlyMap<Node, string>, into: Set<Node>): void {
  for (const g of subgraphsOf(n)) {
    for (const m of g.nodes) {
      if (watch.has(m)) into.add(m);
      nestedWatched(m, watch, into);
    }
  }
}

/**
 * For each output of `graph`, the watched nodes its value depends on (through bodies of If/Loop/Scan too): a
 * walk back from each output over producers, so the cost is outputs x nodes, never nodes x watched nodes. Values
 * are followed by slot (src/eval/plan.ts), so the walk makes no map of names.
 */
export function upstreamOfOutputs(graph: Graph, watch: ReadonlyMap<Node, string>): Map<string, Set<Node>> {
  const plan = planOf(graph);
  const nodes = graph.nodes;
  const { inStart, inSlot, outStart, outSlot, slotOf } = plan;
  const producer = new Int32Array(plan.names.length).fill(-1);
  for (let i = 0; i < nodes.length; i++) for (let k = outStart[i]!; k < outStart[i + 1]!; k++) { const s = outSlot[k]!; if (s >= 0) producer[s] = i; }
  const seenIn = new Int32Array(nodes.length).fill(-1); // the output whose walk last reached each node
  const out = new Map<string, Set<Node>>();
  graph.outputs.forEach((o, walk) => {
    const found = new Set<Node>();
    const stack: number[] = [];
    const push = (s: number | undefined) => {
      const p = s === undefined || s < 0 ? -1 : producer[s]!;
      if (p >= 0 && seenIn[p] !== walk) { seenIn[p] = walk; stack.push(p); }
    };
    push(slotOf.get(o.name));
    while (stack.length) {
      const i = stack.pop()!;
      const n = nodes[i]!;
      if (watch.has(n)) found.add(n);
      if (hasSubgraphs(n)) {
        nestedWatched(n, watch, found);
        for (const v of readsOf(n)) push(slotOf.get(v));
      } else {
        for (let k = inStart[i]!; k < inStart[i + 1]!; k++) push(inSlot[k]);
      }
    }
    out.set(o.name, found);
  });
  return out;
}
