// State shared by the analysis and the rewrites of one run over a model.
import type { Model, Node } from '../graph/ir.js';
import { opsetVersion } from '../graph/ir.js';
import type { FoldOptions, ReasonCode } from './types.js';
import { eachGraph, nodeLabel } from './scope.js';

export interface FoldContext {
  options: FoldOptions;
  allowOverridable: boolean;
  keep: Set<string>;
  /** Norm nodes whose fold failed its proof: kept with reason proof-failed. */
  proofFailed: Set<Node>;
  /** Nodes pleat created (bias Adds): never anchors nor part of a run, so a fold cannot feed on its own output. */
  generated: Set<Node>;
  opsetOf: (domain: string) => number;
  /** Every name in use (values, nodes), for deterministic fresh names. */
  names: Set<string>;
  /** Ledger names fixed at the start (an unnamed node keeps its op#index even after other nodes go). */
  labels: Map<Node, string>;
  irVersion: number;
}

export interface Refusal {
  reason: ReasonCode;
  hint: string;
}

export function isRefusal(x: unknown): x is Refusal {
  return typeof x === 'object' && x !== null && 'reason' in x && 'hint' in x && !('rule' in x);
}

export function refuse(reason: ReasonCode, hint: string): Refusal {
  return { reason, hint };
}

export function makeContext(model: Model, options: FoldOptions): FoldContext {
  const names = new Set<string>();
  const labels = new Map<Node, string>();
  eachGraph(model.graph, (g) => {
    g.nodes.forEach((n, i) => labels.set(n, nodeLabel(n, i)));
    for (const v of g.inputs) names.add(v.name);
    for (const v of g.outputs) names.add(v.name);
    for (const v of g.valueInfo) names.add(v.name);
    for (const t of g.initializers) names.add(t.name);
    for (const n of g.nodes) {
      if (n.name) names.add(n.name);
      for (const o of n.outputs) if (o) names.add(o);
      for (const i of n.inputs) if (i) names.add(i);
    }
  });
  return {
    options,
    allowOverridable: options.allowOverridable ?? false,
    keep: new Set(options.keep ?? []),
    proofFailed: new Set(),
    generated: new Set(),
    opsetOf: (domain: string) => opsetVersion(model, domain) ?? (domain === '' || domain === 'ai.onnx' ? 1 : 1),
    names,
    labels,
    irVersion: model.irVersion,
  };
}

/** `base`, or `base.2`, `base.3`, ... : the first name not yet used. Deterministic for a given model. */
export function freshName(ctx: FoldContext, base: string): string {
  let name = base;
  for (let k = 2; ctx.names.has(name); k++) name = `${base}.${k}`;
  ctx.names.add(name);
  return name;
}
