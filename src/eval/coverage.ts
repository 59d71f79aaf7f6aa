// Which operators of a model the evaluator cannot run, found before running anything (for `pleat survey`), so a
// user knows ahead of a fold whether the whole-model check will be able to run. Looks each node up in the
// kernel table (kernel-table.ts, the registry's list without the kernels' code) at the opset the model imports for its domain, subgraphs included. A kernel may still
// refuse a particular attribute value when it runs (e.g. Resize antialias when shrinking); those show up in the
// check's status.
import { opsetVersion, subgraphsOf, type Graph, type Model } from '../graph/ir.js';
import { hasKernel, isRandomOp } from './kernel-table.js';

export interface EvaluatorGap {
  /** Operator, domain-qualified outside the default domain. */
  op: string;
  /** Opset the model imports for the operator's domain (0 when it imports none). */
  opset: number;
  /** Nodes of this operator in the model, subgraphs included. */
  count: number;
  /**
   * `no-kernel`: the evaluator has no kernel for it at that opset; `random`: its output is a random draw;
   * `value-form`: Constant nodes whose value form the Constant kernel does not take (sparse_value, strings).
   */
  reason: 'no-kernel' | 'random' | 'value-form';
}

/** The one value attribute a Constant may carry for the Constant kernel (kernels/constant.ts) to run it, with its type. */
const CONSTANT_FORMS: ReadonlyMap<string, string> = new Map([
  ['value', 'TENSOR'], ['value_float', 'FLOAT'], ['value_floats', 'FLOATS'], ['value_int', 'INT'], ['value_ints', 'INTS'],
]);

/** Constant nodes (subgraphs included) the Constant kernel would refuse by their attribute (a sparse_value, a string). */
function constantsInOtherForms(model: Model): number {
  let count = 0;
  const walk = (g: Graph) => {
    for (const n of g.nodes) {
      if (n.opType === 'Constant' && (n.domain === '' || n.domain === 'ai.onnx')) {
        const a = n.attributes.length === 1 ? n.attributes[0]! : undefined;
        if (!a || CONSTANT_FORMS.get(a.name) !== a.value.type) count++;
      }
      for (const sg of subgraphsOf(n)) walk(sg);
    }
  };
  walk(model.graph);
  return count;
}

/** How many nodes of one operator a model holds, subgraphs included (domain '' for the default domain). */
export interface OpTally { domain: string; opType: string; count: number }

/** The model's operators with their node counts, subgraphs included. */
export function opTally(model: Model): OpTally[] {
  const tally = new Map<string, OpTally>();
  const walk = (g: Graph) => {
    for (const n of g.nodes) {
      const domain = n.domain === 'ai.onnx' ? '' : n.domain;
      const key = domain ? `${domain}.${n.opType}` : n.opType;
      const t = tally.get(key);
      if (t) t.count++;
      else tally.set(key, { domain, opType: n.opType, count: 1 });
      for (const sg of subgraphsOf(n)) walk(sg);
    }
  };
  walk(model.graph);
  return [...tally.values()];
}

/**
 * `ops`: the model's operators with their counts, when the caller has them already (survey counts them in its own
 * walk: a second walk over 10^5 nodes, each looked up in the kernel table, showed in its time).
 */
export function evaluatorGaps(model: Model, ops: readonly OpTally[] = opTally(model)): EvaluatorGap[] {
  const gaps: EvaluatorGap[] = [];
  for (const { domain, opType, count } of ops) {
    const opset = opsetVersion(model, domain) ?? 0;
    const random = isRandomOp(domain, opType); // outputs are random draws: two runs differ
    if (random || !hasKernel(domain, opType, opset)) {
      gaps.push({ op: domain ? `${domain}.${opType}` : opType, opset, count, reason: random ? 'random' : 'no-kernel' });
    } else if (domain === '' && opType === 'Constant') {
      // a kernel for the op is not a kernel for every form of its value (walked only when the model has Constants)
      const other = constantsInOtherForms(model);
      if (other) gaps.push({ op: opType, opset, count: other, reason: 'value-form' });
    }
  }
  return gaps.sort((a, b) => (a.op < b.op ? -1 : a.op > b.op ? 1 : 0));
}
