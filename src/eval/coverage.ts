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
  /** `no-kernel`: the evaluator has no kernel for it at that opset; `random`: its output is a random draw. */
  reason: 'no-kernel' | 'random';
}

export function evaluatorGaps(model: Model): EvaluatorGap[] {
  const gaps = new Map<string, EvaluatorGap>();
  const walk = (g: Graph) => {
    for (const n of g.nodes) {
      const domain = n.domain === 'ai.onnx' ? '' : n.domain;
      const opset = opsetVersion(model, domain) ?? 0;
      const random = isRandomOp(domain, n.opType); // outputs are random draws: two runs differ
      if (random || !hasKernel(domain, n.opType, opset)) {
        const op = domain ? `${domain}.${n.opType}` : n.opType;
        const gap = gaps.get(op) ?? { op, opset, count: 0, reason: random ? 'random' : 'no-kernel' };
        gap.count++;
        gaps.set(op, gap);
      }
      for (const sg of subgraphsOf(n)) walk(sg);
    }
  };
  walk(model.graph);
  return [...gaps.values()].sort((a, b) => (a.op < b.op ? -1 : a.op > b.op ? 1 : 0));
}
