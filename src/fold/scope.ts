// The model seen by the fold rules: every graph (main and nested bodies) with its producer/consumer index,
// a path for reports, and lookups that follow outer scopes (a body reads the outer graph's weights).
import { isShorthandConstant } from '../graph/constants.js';
import type { Graph, Model, Node, Tensor, ValueInfo } from '../graph/ir.js';
import { hasSubgraphs, subgraphsOf } from '../graph/ir.js';
import { buildUseDef, outerRefs, type UseDef } from '../graph/usedef.js';
import { inferShapes, type Shape, type ShapeLookup } from '../graph/shapes.js';

export interface Scope {
  graph: Graph;
  /** 'main', or e.g. 'main/if_3.then_branch'. */
  path: string;
  parent?: Scope;
  /** The node owning this body (undefined for the main graph). */
  owner?: Node;
  ud: UseDef;
  /**
   * Ledger names of the unnamed nodes (op#index, or the name fixed at the start); a named node is its name.
   * Read through labelOf: a map of every node would be one more entry per node for the collector to trace.
   */
  labels: Map<Node, string>;
  ranks: Map<string, number | undefined>;
  infos?: Map<string, ValueInfo>;
  /** Before IR version 4 every initializer had to be listed as an input too, so that was no sign of intent. */
  inputsOverride: boolean;
  /** Main graph: shapes given for the model's inputs (see FoldOptions.inputShapes). */
  inputShapes?: ReadonlyMap<string, Shape>;
  /** Shapes propagated from the inputs (src/graph/shapes.ts), worked out on first need. */
  inferred?: ShapeLookup;
}

/** A constant read by a node: where it is defined and whether others read it. */
export interface ConstRef {
  name: string;
  tensor: Tensor;
  /** Scope whose graph holds the initializer or the Constant node. */
  home: Scope;
  constantNode?: Node;
  /** Also declared as a graph input: callers may replace it at run time. */
  overridable: boolean;
  /** Held in a Constant node's value_float(s)/value_int(s) shorthand: new values go into a clone. */
  shorthand?: boolean;
}

export function nodeLabel(n: Node, index: number): string {
  return n.name || `${n.opType}#${index}`;
}

/** Ledger name of a node of this scope. */
export function labelOf(scope: Scope, n: Node): string {
  return scope.labels.get(n) ?? n.name;
}

export function isDefaultDomain(n: Node): boolean {
  return n.domain === '' || n.domain === 'ai.onnx';
}

/**
 * Every graph of the model, main first, bodies in node order (pre-order). `index` makes each graph's use-def index
 * (the fold driver passes editableUseDef, which its edits then keep current).
 */
export function buildScopes(model: Model, fixedLabels?: Map<Node, string>, inputShapes?: ReadonlyMap<string, Shape>, index: (g: Graph) => UseDef = buildUseDef): Scope[] {
  const out: Scope[] = [];
  const visit = (graph: Graph, path: string, parent?: Scope, owner?: Node) => {
    const labels = scopeLabels(graph.nodes, fixedLabels);
    const scope: Scope = { graph, path, parent, owner, ud: index(graph), labels, ranks: new Map(), inputsOverride: model.irVersion >= 4, inputShapes: parent ? undefined : inputShapes };
    out.push(scope);
    const nodes = graph.nodes;
    for (let i = 0; i < nodes.length; i++) if (hasSubgraphs(nodes[i]!)) visitBodies(nodes[i]!, scope);
  };
  const visitBodies = (n: Node, scope: Scope) => {
    for (const a of n.attributes) {
      if (a.value.type !== 'GRAPH' && a.value.type !== 'GRAPHS') continue;
      const gs = a.value.type === 'GRAPH' ? [a.value.g] : a.value.graphs;
      gs.forEach((g, k) => visit(g, `${scope.path}/${labelOf(scope, n)}.${a.name}${gs.length > 1 ? `[${k}]` : ''}`, scope, n));
    }
  };
  visit(model.graph, 'main');
  return out;
}

/**
 * The labels map of a scope (see Scope.labels). Its own function, as is the walk into bodies: a loop optimized
 * while it runs over the main graph is entered again for every body, and code after the loop that had not run yet
 * when it was optimized sent each body back to the interpreter (78 times in a graph with 539 bodies).
 */
function scopeLabels(nodes: readonly Node[], fixedLabels: Map<Node, string> | undefined): Map<Node, string> {
  const labels = new Map<Node, string>();
  for (let i = 0; i < nodes.length; i++) {
    const n = nodes[i]!;
    const fixed = fixedLabels?.get(n);
    if (fixed !== undefined ? fixed !== n.name : !n.name) labels.set(n, fixed ?? nodeLabel(n, i));
  }
  return labels;
}

/**
 * Forget what a scope worked out from its graph (declared infos, ranks, propagated shapes), as a newly built scope
 * would not know them: the fold driver reuses its scopes from one sweep to the next while the graph changes.
 */
export function forgetDerived(s: Scope): void {
  s.ranks = new Map();
  s.infos = undefined;
  s.inferred = undefined;
}

/** True when the scope defines the value itself (input, initializer or node output). */
function definesLocally(s: Scope, v: string): boolean {
  return s.ud.defines(v);
}

/** The scope that defines a value, following outer scopes. */
export function homeOf(s: Scope, v: string): Scope | undefined {
  for (let c: Scope | undefined = s; c; c = c.parent) if (definesLocally(c, v)) return c;
  return undefined;
}

/** The constant behind a value (initializer or Constant node, in this or an outer scope), if any. */
export function constantOf(s: Scope, v: string): ConstRef | undefined {
  // The common case, a weight stored in the reader's own graph, in one lookup: an initializer defines v here.
  let init = s.ud.initializer(v);
  const home = init ? s : homeOf(s, v);
  if (!home) return undefined;
  init ??= home.ud.initializer(v);
  if (init) return { name: v, tensor: init, home, overridable: home.inputsOverride && home.ud.isGraphInput(v) };
  const p = home.ud.producer(v);
  if (!p || p.opType !== 'Constant' || !isDefaultDomain(p)) return undefined;
  const t = home.ud.constantTensor(v);
  return t ? { name: v, tensor: t, home, constantNode: p, overridable: false, shorthand: isShorthandConstant(t) } : undefined;
}

/**
 * Whether `node` (in scope `s`) is the only reader of value `v`, counting reads from nested bodies and from
 * every scope between `s` and the value's home. A value that is a graph output is never solely read.
 */
export function soleReader(s: Scope, v: string, node: Node): boolean {
  const home = homeOf(s, v);
  let reader: Node = node;
  for (let c: Scope | undefined = s; c; c = c.parent) {
    const readers = c.ud.consumers(v);
    if (readers.length !== 1 || readers[0] !== reader || c.ud.isGraphOutput(v)) return false;
    if (c === home) return true;
    const owner = c.owner;
    if (!owner) return false;
    // The owner reads v for this body; it must not also read it itself or through its other bodies.
    if (owner.inputs.includes(v)) return false;
    if (subgraphsOf(owner).some((g) => g !== c.graph && outerRefs(g).has(v))) return false;
    reader = owner;
  }
  return false;
}

function infoMap(s: Scope): Map<string, ValueInfo> {
  if (!s.infos) {
    s.infos = new Map();
    for (const list of [s.graph.valueInfo, s.graph.outputs, s.graph.inputs]) for (const vi of list) s.infos.set(vi.name, vi);
  }
  return s.infos;
}

/** Declared type and shape of a value (value_info, graph inputs/outputs), following outer scopes. */
export function valueInfoOf(s: Scope, v: string): ValueInfo | undefined {
  for (let c: Scope | undefined = s; c; c = c.parent) {
    const vi = infoMap(c).get(v);
    if (vi) return vi;
    if (definesLocally(c, v)) {
      const t = c.ud.initializer(v);
      if (t) return { name: v, elemType: t.dataType, shape: [...t.dims], docString: '', extra: [] };
      return undefined;
    }
  }
  return undefined;
}

const SAME_RANK = new Set([
  'Relu', 'LeakyRelu', 'PRelu', 'Sigmoid', 'Tanh', 'HardSigmoid', 'HardSwish', 'Elu', 'Selu', 'Celu', 'Gelu', 'Erf',
  'Softplus', 'Softsign', 'Clip', 'Identity', 'Dropout', 'Abs', 'Neg', 'Exp', 'Log', 'Sqrt', 'Reciprocal', 'Cast',
  'Softmax', 'LogSoftmax', 'BatchNormalization', 'InstanceNormalization', 'LayerNormalization', 'GroupNormalization',
  'LpNormalization', 'LRN', 'MeanVarianceNormalization', 'Floor', 'Ceil', 'Round', 'Sign', 'Mish',
]);
const BROADCASTING = new Set(['Add', 'Sub', 'Mul', 'Div', 'Pow', 'Max', 'Min', 'Sum', 'Mean', 'Where']);

/** Rank of a value when it can be known from declarations or from how it was produced. */
export function rankOf(s: Scope, v: string, depth = 0): number | undefined {
  if (s.ranks.has(v)) return s.ranks.get(v);
  let r: number | undefined;
  const vi = valueInfoOf(s, v);
  if (vi?.shape) r = vi.shape.length;
  else if (depth < 64) {
    const home = homeOf(s, v);
    const p = home?.ud.producer(v);
    if (home && p && isDefaultDomain(p)) {
      const ins = p.inputs;
      const w = ins[1] ? constantOf(home, ins[1]) : undefined;
      if (p.opType === 'Conv' || p.opType === 'ConvTranspose') r = w ? w.tensor.dims.length : rankOf(home, ins[0]!, depth + 1);
      else if (p.opType === 'Gemm') r = 2;
      else if (p.opType === 'Constant') r = constantOf(home, v)?.tensor.dims.length;
      else if (p.opType === 'MatMul') {
        const a = rankOf(home, ins[0]!, depth + 1);
        const b = ins[1] ? rankOf(home, ins[1], depth + 1) : undefined;
        if (a !== undefined && b !== undefined) r = a === 1 && b === 1 ? 0 : Math.max(a, b) - (a === 1 || b === 1 ? 1 : 0);
      } else if (SAME_RANK.has(p.opType) && p.outputs[0] === v) r = rankOf(home, ins[0]!, depth + 1);
      else if (BROADCASTING.has(p.opType)) {
        let m = 0;
        for (const i of ins) {
          if (!i) continue;
          const ri = rankOf(home, i, depth + 1);
          if (ri === undefined) { m = -1; break; }
          m = Math.max(m, ri);
        }
        r = m < 0 ? undefined : m;
      } else if (p.opType === 'Flatten') r = 2;
    }
  }
  // Not declared and not evident from the producer: propagate shapes from the model's inputs.
  if (r === undefined) r = inferredShape(s, v)?.length;
  s.ranks.set(v, r);
  return r;
}

/** The shape of a value propagated from the graph's inputs (and the enclosing graphs' values), if it can be. */
export function inferredShape(s: Scope, v: string): Shape | undefined {
  return shapesOf(homeOf(s, v) ?? s).get(v);
}

function shapesOf(s: Scope): ShapeLookup {
  s.inferred ??= inferShapes(s.graph, s.inputShapes, s.parent ? shapesOf(s.parent) : undefined);
  return s.inferred;
}

export const LINEAR_OPS = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);

export function isLinear(n: Node): boolean {
  return isDefaultDomain(n) && LINEAR_OPS.has(n.opType);
}

/** Every graph of a scope's subtree is visited through buildScopes; this walks a single graph's bodies. */
export function eachGraph(g: Graph, fn: (g: Graph) => void): void {
  fn(g);
  // (no list of bodies made per node: nearly every node has none)
  const nodes = g.nodes;
  for (let i = 0; i < nodes.length; i++) if (hasSubgraphs(nodes[i]!)) for (const sg of subgraphsOf(nodes[i]!)) eachGraph(sg, fn);
}
