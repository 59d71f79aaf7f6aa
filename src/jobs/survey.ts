// `survey`: what a model file holds, for people and scripts.
import type { Dim, Graph, Model, ValueInfo } from '../graph/ir.js';
import { subgraphsOf } from '../graph/ir.js';
import { dataTypeName, tensorByteSize } from '../graph/tensor.js';
import { externalBytes } from '../onnx/external.js';
import { readModelFile } from '../onnx/read.js';
import { evaluatorGaps, type EvaluatorGap } from '../eval/coverage.js';

export const NORMALIZATION_OPS = [
  'BatchNormalization', 'InstanceNormalization', 'LayerNormalization', 'GroupNormalization',
  'LpNormalization', 'LRN', 'MeanVarianceNormalization',
] as const;

export interface SurveyValue { name: string; type: string; dims: Array<number | string | null> | null }

export interface SurveyReport {
  file: string | null;
  irVersion: number;
  opsets: Array<{ domain: string; version: number }>;
  producer: { name: string; version: string };
  inputs: SurveyValue[];
  outputs: SurveyValue[];
  /** Nodes in the main graph and in every subgraph. */
  nodeCount: number;
  subgraphCount: number;
  /** Node count by op type (domain-qualified outside the default domain), most frequent first. */
  opCounts: Array<{ op: string; count: number }>;
  initializers: { count: number; bytes: number };
  constantNodes: { count: number; bytes: number };
  externalBytes: number;
  normalizations: Array<{ op: string; count: number }>;
  /**
   * Whether pleat's evaluator can run every operator (so the whole-model check of a fold can run), and the
   * operators it cannot run, with the reason for each.
   */
  evaluator: { runsAll: boolean; cannotRun: EvaluatorGap[] };
}

function describeValue(v: ValueInfo): SurveyValue {
  return {
    name: v.name,
    type: v.elemType === undefined ? 'non-tensor' : dataTypeName(v.elemType),
    dims: v.shape === undefined ? null : v.shape.map((d: Dim) => d),
  };
}

export function surveyModel(model: Model, file: string | null = null): SurveyReport {
  const counts = new Map<string, number>();
  let nodeCount = 0, subgraphCount = 0, initCount = 0, initBytes = 0, constCount = 0, constBytes = 0;
  const walk = (g: Graph) => {
    for (const t of g.initializers) { initCount++; initBytes += tensorByteSize(t); }
    for (const n of g.nodes) {
      nodeCount++;
      const op = n.domain && n.domain !== 'ai.onnx' ? `${n.domain}.${n.opType}` : n.opType;
      counts.set(op, (counts.get(op) ?? 0) + 1);
      if (n.opType === 'Constant') {
        constCount++;
        for (const a of n.attributes) if (a.value.type === 'TENSOR') constBytes += tensorByteSize(a.value.t);
      }
      for (const sg of subgraphsOf(n)) { subgraphCount++; walk(sg); }
    }
  };
  walk(model.graph);
  const gaps = evaluatorGaps(model);
  const opCounts = [...counts].map(([op, count]) => ({ op, count }))
    .sort((a, b) => b.count - a.count || (a.op < b.op ? -1 : a.op > b.op ? 1 : 0));
  return {
    file,
    irVersion: model.irVersion,
    opsets: model.opsets.map((o) => ({ domain: o.domain || 'ai.onnx', version: o.version })),
    producer: { name: model.producerName, version: model.producerVersion },
    inputs: model.graph.inputs.filter((v) => !model.graph.initializers.some((t) => t.name === v.name)).map(describeValue),
    outputs: model.graph.outputs.map(describeValue),
    nodeCount,
    subgraphCount,
    opCounts,
    initializers: { count: initCount, bytes: initBytes },
    constantNodes: { count: constCount, bytes: constBytes },
    externalBytes: externalBytes(model),
    normalizations: opCounts.filter((c) => (NORMALIZATION_OPS as readonly string[]).includes(c.op)),
    evaluator: { runsAll: gaps.length === 0, cannotRun: gaps },
  };
}

export function survey(path: string): SurveyReport {
  return surveyModel(readModelFile(path), path);
}
