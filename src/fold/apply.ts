// Edits: what a rule's rewrite produces (tensors to replace, nodes to remove or add, names to rewire), applied
// to the graph with an undo, plus the before/after regions a numeric proof runs.
import type { Attribute, Graph, Node, Tensor, ValueInfo } from '../graph/ir.js';
import { touch } from '../graph/edit.js';
import type { EditableUseDef } from '../graph/usedef.js';
import { decodeValues, scaleTensor, storeValues, type ScaleGuard } from './values.js';
import { scaleWeights, type ChannelMap } from './weights.js';
import { makeTensor } from '../graph/tensor.js';
import { constantOf, inferredShape, soleReader, valueInfoOf, type ConstRef, type Scope } from './scope.js';
import { freshName, type FoldContext, type LiveScope, type PendingGraph } from './context.js';

export interface NodeChange {
  node: Node;
  opType?: string;
  inputs?: string[];
  outputs?: string[];
  attributes?: Attribute[];
}

export interface Edit {
  scope: Scope;
  removeNodes: Node[];
  changes: NodeChange[];
  /** New nodes, each placed right after an existing node. */
  inserts: Array<{ node: Node; after: Node }>;
  tensorValues: Array<{ ref: ConstRef; values: Float64Array; dims: number[] }>;
  /** Channel scalings of existing tensors (the weights): applied where the data lies. */
  tensorScales: Array<{ ref: ConstRef; map: ChannelMap; scale: Float64Array; guard?: ScaleGuard }>;
  newInitializers: Tensor[];
  /** Values that no longer exist (their value_info is dropped at clean-up). */
  goneValues: string[];
  /** Constants that lost a reader (dropped at clean-up when nobody reads them any more). */
  released: string[];
  /** The values the rest of the graph reads from the edited region (proof outputs). */
  regionOutputs: string[];
  /** Runs already removed by this edit (several readers of one run each take it; mostly one, so a list). */
  removedRuns: object[];
  /** Unchanged nodes the proof region must hold too (the original of a cloned layer). */
  regionNodes: Node[];
}

export function newEdit(scope: Scope): Edit {
  return { scope, removeNodes: [], changes: [], inserts: [], tensorValues: [], tensorScales: [], newInitializers: [], goneValues: [], released: [], regionOutputs: [], removedRuns: [], regionNodes: [] };
}

/** The pending change record of a node (created on first use). */
export function changeOf(edit: Edit, node: Node): NodeChange & { inputs: string[]; outputs: string[] } {
  const changes = edit.changes;
  for (let k = 0; k < changes.length; k++) if (changes[k]!.node === node) return changes[k] as NodeChange & { inputs: string[]; outputs: string[] };
  const c = { node, inputs: node.inputs.slice(), outputs: node.outputs.slice() };
  changes.push(c);
  return c;
}

/**
 * New values for the constant read at input `index` of `node`: written into the tensor itself when this node
 * is its only reader, else into a clone with a fresh deterministic name (`<name>.folded`, `<name>.folded.2`).
 */
export function replaceConstant(ctx: FoldContext, edit: Edit, node: Node, index: number, ref: ConstRef, values: Float64Array, dims: number[]): void {
  if (soleReader(edit.scope, ref.name, node) && !ref.overridable && !ref.shorthand) {
    edit.tensorValues.push({ ref, values, dims });
    return;
  }
  const name = freshName(ctx, `${ref.name}.folded`);
  edit.newInitializers.push(makeTensor(name, dims, ref.tensor.dataType, values));
  changeOf(edit, node).inputs[index] = name;
  edit.released.push(ref.name);
}

/**
 * Scale the weight read at input `index` of `node` by channel: in the tensor itself when this node is its only
 * reader, else in a clone (see replaceConstant).
 */
export function scaleConstant(ctx: FoldContext, edit: Edit, node: Node, index: number, ref: ConstRef, map: ChannelMap, scale: Float64Array, guard?: ScaleGuard): void {
  if (soleReader(edit.scope, ref.name, node) && !ref.overridable && !ref.shorthand) {
    edit.tensorScales.push({ ref, map, scale, guard });
    return;
  }
  const values = decodeValues(ref.tensor);
  const m = scaleWeights(values, map, scale, values);
  guard?.(m);
  replaceConstant(ctx, edit, node, index, ref, values, ref.tensor.dims);
}

/** A bias the layer did not have: a new initializer wired to input `index`. */
export function addConstantInput(ctx: FoldContext, edit: Edit, node: Node, index: number, base: string, dataType: number, values: Float64Array, dims: number[]): void {
  const name = freshName(ctx, base);
  edit.newInitializers.push(makeTensor(name, dims, dataType, values));
  const c = changeOf(edit, node);
  // (a list of the new length, '' in any gap: it becomes the node's inputs, and one grown by push holds room for 17)
  if (index >= c.inputs.length) {
    const inputs = new Array<string>(index + 1).fill('');
    for (let k = 0; k < c.inputs.length; k++) inputs[k] = c.inputs[k]!;
    c.inputs = inputs;
  }
  c.inputs[index] = name;
}

export function makeNode(opType: string, name: string, inputs: string[], outputs: string[]): Node {
  return { name, opType, domain: '', inputs, outputs, attributes: [], docString: '', extra: [] };
}

/**
 * Apply the node and initializer list changes of every edited graph, and tell the driver's use-def indexes (when
 * it keeps them, see FoldContext.live) what changed: each index then answers for the graph as it now is.
 */
export function flushPending(ctx: FoldContext): void {
  ctx.flushed = true;
  const edited = new Set<EditableUseDef>();
  for (const [g, p] of ctx.pending) {
    const lists = p.removed.size > 0 || p.inserts.size > 0 || p.initializers.length > 0 || p.inputs.length > 0;
    if (lists) {
      const nodes: Node[] = [];
      // An inserted node may have inserts of its own (the bias Add after a cloned layer).
      const emit = (n: Node) => {
        if (!p.removed.has(n)) nodes.push(n);
        const after = p.inserts.size ? p.inserts.get(n) : undefined; // (no empty list made per node)
        if (after) for (const a of after) emit(a);
      };
      const old = g.nodes;
      for (let i = 0; i < old.length; i++) emit(old[i]!);
      g.nodes = nodes;
      if (p.initializers.length) g.initializers = g.initializers.concat(p.initializers);
      if (p.inputs.length) g.inputs = g.inputs.concat(p.inputs);
      touch(g);
    }
    p.removed.forEach((n) => { ctx.removedNodes.push(n); }); // (forEach: no entry or iterator result made per node)
    const live = ctx.live?.get(g);
    if (live) updateIndex(ctx, live, p, edited);
  }
  ctx.pending.clear();
  // reader lists back in node order, once per graph (a graph with many edited bodies is not walked per body)
  for (const ud of edited) ud.settle();
}

/**
 * One graph's index follows a sweep's edits; owners of an edited body read what the body now reads. The edits are
 * told one at a time, in the order they were applied (see logEdit), each node brought from the wiring it had
 * before to the wiring it has now, which keeps the index exact whatever came before: a node changed by a later
 * edit too, or removed by one, is then told again with nothing left to change, or removed as it now is. Told
 * together, the few names one fold touches are mostly answered by the index's last-name look-up without being
 * hashed again (told as a removal pass, a rewiring pass and an addition pass over the whole sweep, every name was
 * a probe into a table larger than the processor's cache).
 */
function updateIndex(ctx: FoldContext, live: LiveScope, p: PendingGraph, edited: Set<EditableUseDef>): void {
  const ud = live.ud;
  edited.add(ud);
  const log = p.log, kinds = p.logKinds;
  for (let k = 0; k < log.length; k++) {
    switch (kinds[k]) {
      case LOG_INSERT: ud.addNode(log[k] as Node); break;
      case LOG_REWIRE: ud.rewire(log[k] as Node, { inputs: log[k + 1] as string[], outputs: log[k + 2] as string[] }); k += 2; break;
      case LOG_INITIALIZER: ud.addInitializer(log[k] as Tensor); break;
      case LOG_REMOVE: ud.removeNode(log[k] as Node); break;
      case LOG_RELEASED: {
        // (the parameters of the norm just removed: the look-up still holds them)
        const v = log[k] as string;
        live.released.push(v);
        live.releasedIds.push(ud.idOf(v));
        break;
      }
    }
  }
  for (const v of p.inputs) ud.addGraphInput(v.name);
  for (let s = live.scope; s.owner && s.parent; s = s.parent) {
    const outer = ctx.live!.get(s.parent.graph)!.ud;
    outer.refreshBodyReads(s.owner);
    edited.add(outer);
  }
}

// What PendingGraph.log holds at each place (in logKinds). A rewired node is followed by the inputs and outputs it
// had before (two places of kind LOG_WIRING).
const LOG_INSERT = 0, LOG_REWIRE = 1, LOG_WIRING = 2, LOG_INITIALIZER = 3, LOG_REMOVE = 4, LOG_RELEASED = 5;

/**
 * Log an edit for the driver's index (see updateIndex), before it is applied: inserted nodes, rewired nodes with
 * their wiring before, new initializers, the nodes removed, then the names released; so a layer's rewiring and
 * new bias are told before the norm it replaces goes, and the norm's parameters are numbered right after the
 * index dropped them as its inputs. Returns where its entries start.
 */
function logEdit(p: PendingGraph, edit: Edit): number {
  const log = p.log, kinds = p.logKinds, at = log.length;
  for (let k = 0; k < edit.inserts.length; k++) { log.push(edit.inserts[k]!.node); kinds.push(LOG_INSERT); }
  for (let k = 0; k < edit.changes.length; k++) {
    const c = edit.changes[k]!;
    if (!c.inputs && !c.outputs) continue;
    log.push(c.node, c.node.inputs, c.node.outputs);
    kinds.push(LOG_REWIRE, LOG_WIRING, LOG_WIRING);
  }
  for (let k = 0; k < edit.newInitializers.length; k++) { log.push(edit.newInitializers[k]!); kinds.push(LOG_INITIALIZER); }
  for (let k = 0; k < edit.removeNodes.length; k++) { log.push(edit.removeNodes[k]!); kinds.push(LOG_REMOVE); }
  for (let k = 0; k < edit.released.length; k++) { log.push(edit.released[k]!); kinds.push(LOG_RELEASED); }
  return at;
}

/**
 * Apply an edit to its graph. Returns the undo (which restores every object, origins included); with
 * `undoable` false (a fold that will not be proven) nothing is recorded for it and the undo does nothing.
 */
export function applyEdit(ctx: FoldContext, edit: Edit, inPlace: boolean, undoable = true): () => void {
  // (an unproven fold takes the plain path: no undo, so no closure or saved copy made per fold)
  const undo: Array<() => void> | undefined = undoable ? [] : undefined;
  for (let k = 0; k < edit.tensorValues.length; k++) {
    const tv = edit.tensorValues[k]!;
    const t = tv.ref.tensor;
    if (undo) save(undo, t, ['storage', 'dims', 'dataType']);
    storeValues(t, tv.values, tv.dims, inPlace);
    touchConstantNode(undo, tv.ref);
  }
  for (let k = 0; k < edit.tensorScales.length; k++) {
    const ts = edit.tensorScales[k]!;
    const t = ts.ref.tensor;
    if (undo) save(undo, t, ['storage', 'dims', 'dataType']);
    scaleTensor(t, ts.map, ts.scale, inPlace, ts.guard);
    touchConstantNode(undo, ts.ref);
  }
  const g = edit.scope.graph;
  // (the index is told the edits in the order they were applied, see updateIndex)
  if (ctx.live) {
    const p = pendingOf(ctx, g);
    const at = logEdit(p, edit), end = p.log.length;
    // (undone in the order applied, last first: the edit's entries are where they were put)
    if (undo) undo.push(() => { p.log.splice(at, end - at); p.logKinds.splice(at, end - at); });
  }
  for (let k = 0; k < edit.changes.length; k++) {
    const c = edit.changes[k]!;
    if (undo) save(undo, c.node, ['opType', 'inputs', 'outputs', 'attributes']);
    if (c.opType !== undefined) c.node.opType = c.opType;
    if (c.inputs) c.node.inputs = c.inputs;
    if (c.outputs) c.node.outputs = c.outputs;
    if (c.attributes) c.node.attributes = c.attributes;
    touch(c.node);
  }
  if (edit.removeNodes.length || edit.inserts.length || edit.newInitializers.length) {
    // List changes wait for flushPending, so a sweep of many folds rebuilds each list once.
    const pg = pendingOf(ctx, g);
    for (let k = 0; k < edit.removeNodes.length; k++) pg.removed.add(edit.removeNodes[k]!);
    for (const ins of edit.inserts) pg.inserts.set(ins.after, [...(pg.inserts.get(ins.after) ?? []), ins.node]);
    const initsAt = pg.initializers.length, inputsAt = pg.inputs.length;
    for (let k = 0; k < edit.newInitializers.length; k++) pg.initializers.push(edit.newInitializers[k]!);
    // Before IR version 4 every initializer of the main graph must also be a graph input.
    const newInputs = ctx.irVersion < 4 && !edit.scope.parent
      ? edit.newInitializers.map((t): ValueInfo => ({ name: t.name, elemType: t.dataType, shape: [...t.dims], docString: '', extra: [] }))
      : [];
    for (let k = 0; k < newInputs.length; k++) pg.inputs.push(newInputs[k]!);
    if (undo) undo.push(() => {
      for (const n of edit.removeNodes) pg.removed.delete(n);
      for (const ins of edit.inserts) pg.inserts.set(ins.after, (pg.inserts.get(ins.after) ?? []).filter((x) => x !== ins.node));
      // undone right after it was applied (a failed proof, or a proven fold applied again in place), the edit's
      // additions are still the tail of the lists: cut them off instead of filtering lists as long as the graph
      const tail = <T>(list: T[], at: number, added: T[]) => list.length === at + added.length && added.every((x, i) => list[at + i] === x);
      if (tail(pg.initializers, initsAt, edit.newInitializers)) pg.initializers.length = initsAt;
      else pg.initializers = pg.initializers.filter((t) => !edit.newInitializers.includes(t));
      if (tail(pg.inputs, inputsAt, newInputs)) pg.inputs.length = inputsAt;
      else pg.inputs = pg.inputs.filter((v) => !newInputs.includes(v));
    });
  }
  for (let k = 0; k < edit.inserts.length; k++) ctx.generated.add(edit.inserts[k]!.node);
  return undo ? () => { for (let i = undo.length - 1; i >= 0; i--) undo[i]!(); } : NO_UNDO;
}

const NO_UNDO = (): void => {};

/** Record how `obj` is now (the named fields and its origin), for the undo. */
function save<T extends object>(undo: Array<() => void>, obj: T, keys: Array<keyof T>): void {
  const old = keys.map((k) => obj[k]);
  const origin = (obj as { origin?: unknown }).origin;
  undo.push(() => {
    keys.forEach((k, i) => { obj[k] = old[i] as T[keyof T]; });
    if (origin !== undefined) (obj as { origin?: unknown }).origin = origin;
  });
}

/** A tensor held by a Constant node changed: the node and its attribute are re-encoded too. */
function touchConstantNode(undo: Array<() => void> | undefined, ref: ConstRef): void {
  const cn = ref.constantNode;
  if (!cn) return;
  if (undo) save(undo, cn, ['attributes']);
  for (const a of cn.attributes) {
    if (a.value.type === 'TENSOR' && a.value.t === ref.tensor) {
      if (undo) save(undo, a, ['value']);
      touch(a);
    }
  }
  touch(cn);
}

/** The pending list changes of a graph (made on first use). */
function pendingOf(ctx: FoldContext, g: Graph): PendingGraph {
  let p = ctx.pending.get(g);
  if (!p) { p = { log: [], logKinds: [], removed: new Set(), inserts: new Map(), initializers: [], inputs: [] }; ctx.pending.set(g, p); }
  return p;
}

// ---- proof regions ------------------------------------------------------------------------------------

function snapshotNode(n: Node): Node {
  return { ...n, inputs: [...n.inputs], outputs: [...n.outputs], attributes: [...n.attributes] };
}

/**
 * A standalone graph of `nodes` (in graph order): constants they read become initializers (shallow copies,
 * so later edits of the live tensors do not reach them), other reads become inputs.
 */
export function regionGraph(scope: Scope, nodes: Node[], outputs: string[], extraInits: Tensor[] = []): Graph {
  const produced = new Set(nodes.flatMap((n) => n.outputs));
  const inits: Tensor[] = [];
  const inputs: ValueInfo[] = [];
  const seen = new Set<string>();
  const local = new Map(extraInits.map((t) => [t.name, t]));
  for (const n of nodes) {
    for (const v of n.inputs) {
      if (!v || produced.has(v) || seen.has(v)) continue;
      seen.add(v);
      const own = local.get(v);
      const ref = own ? undefined : constantOf(scope, v);
      if (own || ref) {
        const t = own ?? ref!.tensor;
        // field by field: spreading a tensor object costs more than the rest of a small proof's set-up
        const copy: Tensor = { name: v, dims: [...t.dims], dataType: t.dataType, storage: t.storage, docString: t.docString, extra: [...t.extra], origin: undefined };
        if (t.overridable !== undefined) copy.overridable = t.overridable;
        inits.push(copy);
        continue;
      }
      const vi = valueInfoOf(scope, v);
      // Not declared: the shape propagated from the model's inputs, so the proof probes the rank the fold assumed.
      const inferred = vi?.shape ? undefined : inferredShape(scope, v);
      const shape = vi?.shape ? [...vi.shape] : inferred?.map((d) => (d >= 0 ? d : null));
      inputs.push(vi ? { ...vi, shape, origin: undefined } : { name: v, shape, docString: '', extra: [] });
    }
  }
  const outs: ValueInfo[] = outputs.map((o) => {
    const vi = valueInfoOf(scope, o);
    return vi ? { ...vi, origin: undefined } : { name: o, docString: '', extra: [] };
  });
  return { name: 'fold_region', nodes: nodes.map(snapshotNode), initializers: inits, inputs, outputs: outs, valueInfo: [], docString: '', extra: [] };
}

/** A handful of nodes in an order where each runs after the nodes it reads from. */
function ordered(nodes: Node[]): Node[] {
  const left = [...new Set(nodes)];
  const out: Node[] = [];
  while (left.length) {
    const made = new Set(left.flatMap((n) => n.outputs));
    const i = left.findIndex((n) => !n.inputs.some((v) => v && made.has(v)));
    out.push(...left.splice(i < 0 ? 0 : i, 1));
  }
  return out;
}

/** The region an edit rewrites, before applying it. */
export function regionBefore(edit: Edit): Graph {
  const inserted = new Set(edit.inserts.map((i) => i.node));
  const changed = edit.changes.map((c) => c.node).filter((n) => !inserted.has(n));
  return regionGraph(edit.scope, ordered([...edit.regionNodes, ...edit.removeNodes, ...changed]), edit.regionOutputs);
}

/** The same region after applying the edit. */
export function regionAfter(edit: Edit): Graph {
  return regionGraph(edit.scope, ordered([...edit.regionNodes, ...edit.changes.map((c) => c.node), ...edit.inserts.map((i) => i.node)]), edit.regionOutputs, edit.newInitializers);
}
