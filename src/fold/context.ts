// State shared by the analysis and the rewrites of one run over a model.
import type { Graph, Model, Node, Tensor, ValueInfo } from '../graph/ir.js';
import type { EditableUseDef } from '../graph/usedef.js';
import { opsetVersion } from '../graph/ir.js';
import { nameTable, type NameTable } from '../graph/names.js';
import type { FoldOptions, ReasonCode } from './types.js';
import { eachGraph, nodeLabel, type Scope } from './scope.js';

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
  readonly names: NameSet;
  /** Ledger names fixed at the start for unnamed nodes (an unnamed node keeps its op#index even after other
   * nodes go); a node without an entry is its name. */
  labels: Map<Node, string>;
  irVersion: number;
  /** Next suffix to try per fresh-name base (keeps naming linear when many clones share a base). */
  nameCounters: Map<string, number>;
  /** Node and initializer list changes, applied to each graph once per sweep (see flushPending). */
  pending: Map<Graph, PendingGraph>;
  /**
   * The fold driver's scopes, built once per run: their use-def indexes follow the edits (flushPending tells each
   * index what changed in its graph), so no sweep rebuilds them.
   */
  live?: Map<Graph, LiveScope>;
  /**
   * Nodes the folds and the clean-up took out of their graphs, in the order they went (a list: the driver only walks
   * it once at the end, and a set of 10^5 nodes grew slowly).
   */
  removedNodes: Node[];
  /** Whether a sweep's list changes were applied yet (see flushPending). */
  flushed: boolean;
}

/** The names a fold may not take: a lookup and an add, nothing else. */
export interface NameSet {
  has(name: string): boolean;
  add(name: string): void;
}

export interface LiveScope {
  scope: Scope;
  ud: EditableUseDef;
  /**
   * Constants this graph's folds released (see Edit.released), for the clean-up, each with the number this index
   * gave it when the fold was told (-1: unknown to it), so the clean-up need not hash the name again.
   */
  released: string[];
  releasedIds: number[];
}

export interface PendingGraph {
  /**
   * For the driver's index (see FoldContext.live): what each edit added, rewired (with the wiring before) or
   * removed, and the names it released, edit by edit in the order they were applied; a flat list, no object per
   * edit (a sweep of 10^5 folds kept every edit alive until its end), with what each entry is in logKinds (see
   * apply.ts, logEdit).
   */
  log: Array<Node | Tensor | string | readonly string[]>;
  logKinds: number[];
  removed: Set<Node>;
  inserts: Map<Node, Node[]>;
  initializers: Tensor[];
  inputs: ValueInfo[];
}

export interface Refusal {
  reason: ReasonCode;
  hint: string;
  /**
   * Set when the layer does hold constant weights, only in a form no rule folds into (the first operand of a
   * MatMul, a 3-D MatMul weight): a constant Mul/Add beside it is then a normalization to list as kept, not ignored.
   */
  heldWeights?: true;
}

export function isRefusal(x: unknown): x is Refusal {
  return typeof x === 'object' && x !== null && 'reason' in x && 'hint' in x && !('rule' in x);
}

export function refuse(reason: ReasonCode, hint: string): Refusal {
  return { reason, hint };
}

export function makeContext(model: Model, options: FoldOptions): FoldContext {
  const labels = new Map<Node, string>();
  // Only unnamed nodes need an entry (their op#index must not shift as nodes go); a named node is its name.
  eachGraph(model.graph, (g) => { g.nodes.forEach((n, i) => { if (!n.name) labels.set(n, nodeLabel(n, i)); }); });
  let names: NameSet | undefined;
  // Only a fold needs every name in use (for fresh ones); an audit never builds the set.
  // (with many bodies, asking each index would cost more per fresh name than one table of every name)
  const allNames = () => names ??= (ctx.live && !ctx.flushed && ctx.live.size <= 16 ? namesBeforeFlush(model, ctx.live) : namesIn(model));
  const ctx: FoldContext = {
    options,
    allowOverridable: options.allowOverridable ?? false,
    keep: new Set(options.keep ?? []),
    proofFailed: new Set(),
    generated: new Set(),
    opsetOf: (domain: string) => opsetVersion(model, domain) ?? 1,
    get names() { return allNames(); },
    labels,
    irVersion: model.irVersion,
    nameCounters: new Map(),
    pending: new Map(),
    removedNodes: [],
    flushed: false,
  };
  return ctx;
}

function namesIn(model: Model): NameSet {
  // One flat table of every name (see graph/names.ts; a Set of a few hundred thousand strings costs several
  // times more to fill), and a small set for the names the folds make.
  let bound = 0;
  eachGraph(model.graph, (g) => {
    bound += g.inputs.length + g.outputs.length + g.valueInfo.length + g.initializers.length;
    const nodes = g.nodes;
    for (let i = 0; i < nodes.length; i++) bound += 1 + nodes[i]!.outputs.length + nodes[i]!.inputs.length;
  });
  const table = nameTable(bound);
  const add = table.add;
  eachGraph(model.graph, (g) => {
    for (const v of g.inputs) add(v.name);
    for (const v of g.outputs) add(v.name);
    for (const v of g.valueInfo) add(v.name);
    for (const t of g.initializers) add(t.name);
    const nodes = g.nodes;
    for (let j = 0; j < nodes.length; j++) {
      const n = nodes[j]!;
      if (n.name) add(n.name);
      const outs = n.outputs, ins = n.inputs;
      for (let k = 0; k < outs.length; k++) if (outs[k]) add(outs[k]!);
      for (let k = 0; k < ins.length; k++) if (ins[k]) add(ins[k]!);
    }
  });
  const made = new Set<string>();
  return { has: (v) => table.id(v) >= 0 || made.has(v), add: (v) => { made.add(v); } };
}

/**
 * The names in use while no sweep has applied its list changes yet: every value name is still in its graph's
 * index (a node a fold rewired away from a name leaves it to a node still listed, until the sweep ends), so
 * only node names and value_info names need a table of their own. Same answers as namesIn, less hashing.
 * Every name a fold makes has a '.' in it (`conv3.bias`, `w.folded`), so only the node and value_info names with
 * one can be the same: those go in the table (a graph of 10^5 nodes exported with plain names had all of its node
 * names hashed for none), and every one only if a name without a '.' is ever asked about.
 */
function namesBeforeFlush(model: Model, live: Map<Graph, LiveScope>): NameSet {
  const tableOf = (keep: (name: string) => boolean): NameTable => {
    let bound = 0;
    eachGraph(model.graph, (g) => {
      for (const v of g.valueInfo) if (keep(v.name)) bound++;
      const nodes = g.nodes;
      for (let i = 0; i < nodes.length; i++) if (nodes[i]!.name && keep(nodes[i]!.name)) bound++;
    });
    const table = nameTable(bound);
    eachGraph(model.graph, (g) => {
      for (const v of g.valueInfo) if (keep(v.name)) table.add(v.name);
      const nodes = g.nodes;
      for (let i = 0; i < nodes.length; i++) if (nodes[i]!.name && keep(nodes[i]!.name)) table.add(nodes[i]!.name);
    });
    return table;
  };
  const dotted = tableOf((name) => name.includes('.'));
  let all: NameTable | undefined;
  const indexes = [...live.values()].map((l) => l.ud);
  const made = new Set<string>();
  const known = (v: string) => (v.includes('.') ? dotted : (all ??= tableOf(() => true))).id(v) >= 0;
  return {
    has: (v) => made.has(v) || known(v) || indexes.some((ud) => ud.knows(v)),
    add: (v) => { made.add(v); },
  };
}

/** `base`, or `base.2`, `base.3`, ... : the first name not yet used. Deterministic for a given model. */
export function freshName(ctx: FoldContext, base: string): string {
  let name = base;
  const names = ctx.names;
  const from = ctx.nameCounters.get(base) ?? 2;
  let k = from;
  while (names.has(name)) name = `${base}.${k++}`;
  // (a base taken at once needs no counter: the next call finds it taken and starts from 2 all the same; most
  // bases, one per folded layer, are asked for once)
  if (k !== from) ctx.nameCounters.set(base, k);
  names.add(name);
  return name;
}
