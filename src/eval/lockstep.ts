// Several models run together, node by node: each side (a model in one precision) runs every probe of the check
// at once, so a weight is decoded once per side and dropped as soon as its node has run for every probe, and the
// sides advance in turn, the one furthest behind (by share of its nodes) first. Peak memory is then one weight
// of each side plus the live activations, whatever the size of the models.
import type { Graph, Model, Node } from '../graph/ir.js';
import { GraphRun, WeightCache, prepareRun } from './run.js';
import { liveBytes, resetLive } from './budget.js';
import { planOf, type Plan } from './plan.js';
import type { Precision, Value } from './value.js';

/** A model (its inputs checked as runModel does), or a bare graph with its opsets (a fold's proof region). */
export type LockstepSide = (
  | { model: Model }
  | { graph: Graph; opsetOf: (domain: string) => number }
) & {
  precision: Precision;
  /** One input set per probe. */
  probes: Array<Map<string, Value>>;
  /** Called after each node of this side has run (coverage of a check; see RunOptions.onNode). */
  onNode?: (node: Node) => void;
};

/**
 * Run every side on its probes; returns outputs[side][probe]. An error is passed to `wrap` with the side that
 * raised it (to name the model in the message) and rethrown as it returns.
 */
export function runLockstep(sides: LockstepSide[], wrap: (e: unknown, side: number) => unknown = (e) => e): Array<Array<Map<string, Value>>> {
  const liveAtStart = liveBytes();
  try {
    return lockstep(sides, wrap);
  } finally {
    resetLive(liveAtStart); // what is returned belongs to the caller; a failed run holds nothing
  }
}

function lockstep(sides: LockstepSide[], wrap: (e: unknown, side: number) => unknown): Array<Array<Map<string, Value>>> {
  const state = sides.map((s, i) => {
    try {
      const weights = new WeightCache(true);
      let plan: Plan | undefined; // every probe of a side runs the same graph: one plan (plan.ts)
      const runs = s.probes.map((inputs) => {
        const { graph, given, opsetOf } = 'model' in s ? prepareRun(s.model, inputs) : { graph: s.graph, given: inputs, opsetOf: s.opsetOf };
        if (plan?.graph !== graph) plan = planOf(graph);
        return new GraphRun(graph, given, { precision: s.precision, opsetOf, weights, onNode: s.onNode, plan });
      });
      return { runs, weights };
    } catch (e) { throw wrap(e, i); }
  });
  for (;;) {
    let pick = -1, least = Infinity;
    state.forEach((st, i) => {
      const r = st.runs[0];
      if (r && !r.done && r.progress < least) { least = r.progress; pick = i; }
    });
    if (pick < 0) break;
    const st = state[pick]!;
    try {
      for (const r of st.runs) r.step();
    } catch (e) { throw wrap(e, pick); } finally { st.weights.clear(); }
  }
  return state.map((st, i) => {
    try { return st.runs.map((r) => r.outputs()); } catch (e) { throw wrap(e, i); }
  });
}
