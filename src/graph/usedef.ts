// Producer and consumer index of a graph. Reads from inside a subgraph (If branches, Loop/Scan bodies) of a
// value defined outside it count as reads by the node that owns the subgraph: changing that value would
// change what the subgraph sees.
import { constantNodeTensor } from './constants.js';
import type { Graph, Node, Tensor } from './ir.js';
import { hasSubgraphs, subgraphsOf } from './ir.js';
import { nameTable, type NameTable } from './names.js';
import { keptIds, type KeptIds } from './kept-ids.js';

export interface UseDef {
  graph: Graph;
  producer(value: string): Node | undefined;
  consumers(value: string): Node[];
  isGraphOutput(value: string): boolean;
  isGraphInput(value: string): boolean;
  /** Defined here: a node output, an initializer or a graph input (one lookup for all three). */
  defines(value: string): boolean;
  initializer(value: string): Tensor | undefined;
  /** An initializer or the tensor of a Constant node (value, value_float(s) or value_int(s)). */
  constantTensor(value: string): Tensor | undefined;
}

/** Names a graph (and its nested subgraphs) reads without defining them: its outer-scope references. */
export function outerRefs(g: Graph): Set<string> {
  const defined = new Set<string>();
  for (const v of g.inputs) defined.add(v.name);
  for (const t of g.initializers) defined.add(t.name);
  for (const n of g.nodes) for (const o of n.outputs) if (o) defined.add(o);
  const refs = new Set<string>();
  for (const n of g.nodes) {
    for (const i of n.inputs) if (i && !defined.has(i)) refs.add(i);
    for (const sg of subgraphsOf(n)) for (const r of outerRefs(sg)) if (!defined.has(r)) refs.add(r);
  }
  for (const o of g.outputs) if (!defined.has(o.name)) refs.add(o.name);
  return refs;
}

/** Names an owner node reads through its bodies, once per node (outerRefs walks the whole body). */
function bodyReads(n: Node): string[] {
  const out = new Set<string>();
  for (const sg of subgraphsOf(n)) for (const r of outerRefs(sg)) out.add(r);
  return [...out];
}

const IS_INPUT = 1;
const IS_OUTPUT = 2;

// Every value name of the graph gets a small integer id once; producers, initializers, flags and readers are
// typed arrays indexed by that id. One table of names (see names.ts) instead of a Map per question, and no array per value, so
// a graph of millions of nodes costs a few flat buffers the garbage collector never has to trace.
interface Built {
  nodes: Node[];
  tensors: Tensor[];
  ids: NameTable;
  producer: Int32Array;
  init: Int32Array;
  flags: Uint8Array;
  readers: { start: Int32Array; node: Int32Array };
  /** Owner nodes (by index) and the outer names their bodies read. */
  bodies: Map<number, string[]>;
}

// Each loop over a graph's nodes is a function of its own (as in validate.ts): in one large function, the
// optimizing compiler compiled the whole of it again for each loop reached in turn on a 10^5-node graph, and the
// code it made fell back to the interpreter on each of the graph's small subgraphs (some 2,700 times in an audit
// of a graph with 538 If branches).

/** Output slots and reads (a body's outer reads counted as its owner's) of a graph's nodes; the bodies' reads. */
function countWiring(nodes: readonly Node[], bodies: Map<number, string[]>): { writes: number; reads: number } {
  let writes = 0, reads = 0;
  for (let j = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    writes += n.outputs.length;
    reads += n.inputs.length;
    if (hasSubgraphs(n)) {
      const refs = bodyReads(n);
      bodies.set(j, refs);
      reads += refs.length;
    }
  }
  return { writes, reads };
}

/** Each node's output and read ids, from validation's (`given`) or the table, with its bodies' outer reads. */
function wiringIds(nodes: readonly Node[], bodies: Map<number, string[]>, given: KeptIds | undefined, idOf: (v: string) => number,
  outIds: Int32Array, readIds: Int32Array): void {
  for (let j = 0, w = 0, e = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    if (given) {
      // (validation's ids for the node's own wiring; what its bodies read from outside is added here)
      const o = given.outStart[j]!, r = given.readStart[j]!;
      outIds.set(given.outIds.subarray(o, given.outStart[j + 1]!), w);
      readIds.set(given.readIds.subarray(r, given.readStart[j + 1]!), e);
      w += n.outputs.length; e += n.inputs.length;
    } else {
      for (const o of n.outputs) outIds[w++] = o ? idOf(o) : -1;
      for (const i of n.inputs) readIds[e++] = i ? idOf(i) : -1;
    }
    const refs = bodies.get(j);
    if (refs) for (const r of refs) readIds[e++] = idOf(r);
  }
}

/** Producers by value id, and the read edges (value, node), one per value a node reads; the number of edges. */
function wireEdges(nodes: readonly Node[], bodies: Map<number, string[]>, outIds: Int32Array, readIds: Int32Array,
  producer: Int32Array, lastReader: Int32Array, edgeValue: Int32Array, edgeNode: Int32Array): number {
  let edges = 0;
  for (let j = 0, w = 0, e = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    for (let k = n.outputs.length; k > 0; k--) { const id = outIds[w++]!; if (id >= 0) producer[id] = j; }
    const refs = bodies.get(j);
    for (let k = n.inputs.length + (refs ? refs.length : 0); k > 0; k--) {
      const id = readIds[e++]!;
      if (id < 0 || lastReader[id] === j) continue; // a node reading a value twice is one reader
      lastReader[id] = j;
      edgeValue[edges] = id;
      edgeNode[edges++] = j;
    }
  }
  return edges;
}

function markIds(into: Uint8Array, ids: ArrayLike<number>, flag: number): void {
  for (let k = 0; k < ids.length; k++) into[ids[k]!]! |= flag;
}

function indexIds(into: Int32Array, ids: ArrayLike<number>): void {
  for (let k = 0; k < ids.length; k++) into[ids[k]!] = k;
}

function indexGraph(graph: Graph): Built {
  const nodes = graph.nodes.slice(); // the index answers for the graph as it was built, as a Map of nodes would
  const tensors = graph.initializers.slice();
  const bodies = new Map<number, string[]>();
  const { writes, reads } = countWiring(nodes, bodies);
  // Names first, then the arrays at the number of names found: the ids validation found, when the graph is still
  // as it was then (kept-ids.ts), else a table of our own. Each value is written once, so the writers bound the
  // names well (a table sized by every occurrence was several times too big: 16 MB resident for 10^5 nodes); the
  // table grows for names only read (from outside, or never written).
  const given = keptIds(graph);
  const ids = given?.table ?? nameTable(tensors.length + graph.inputs.length + writes + 16, true);
  const idOf = ids.add;
  let outIds: Int32Array, readIds: Int32Array;
  let outputIds: ArrayLike<number>, inputIds: ArrayLike<number>, tensorIds: ArrayLike<number>;
  if (given && bodies.size === 0) {
    ({ outIds, readIds, outputIds, inputIds, tensorIds } = given);
  } else {
    outIds = new Int32Array(writes);
    readIds = new Int32Array(reads);
    wiringIds(nodes, bodies, given, idOf, outIds, readIds);
    outputIds = given?.outputIds ?? graph.outputs.map((o) => idOf(o.name));
    inputIds = given?.inputIds ?? graph.inputs.map((v) => idOf(v.name));
    tensorIds = given?.tensorIds ?? tensors.map((t) => idOf(t.name));
  }
  const size = ids.size;
  const producer = new Int32Array(size).fill(-1);
  const init = new Int32Array(size).fill(-1);
  const flags = new Uint8Array(size);
  const lastReader = new Int32Array(size).fill(-1);
  const edgeValue = new Int32Array(reads);
  const edgeNode = new Int32Array(reads);
  const edges = wireEdges(nodes, bodies, outIds, readIds, producer, lastReader, edgeValue, edgeNode);
  markIds(flags, outputIds, IS_OUTPUT);
  markIds(flags, inputIds, IS_INPUT);
  indexIds(init, tensorIds);
  return { nodes, tensors, ids, producer, init, flags, readers: csr(size, edgeValue, edgeNode, edges), bodies };
}

/**
 * The analysis asks several questions about one value in a row (producer, readers, output, initializer): the id
 * of the last name found is kept, so those cost one hash of the name instead of one each. (Ids never change.)
 */
function lastLookup(id: (v: string) => number): (v: string) => number {
  let lastName: string | undefined;
  let lastId = -1;
  return (v) => {
    if (v === lastName) return lastId;
    const k = id(v);
    if (k >= 0) { lastName = v; lastId = k; }
    return k;
  };
}

/**
 * lastLookup over the last four names found, the most recent first: a fold asks about the few values around it (the
 * norm's input and output, the layer's weight) several times, with other names in between, and in a graph of 10^5
 * nodes each lookup that misses this costs a hash of the name and a probe into a table larger than the processor's
 * cache. Most questions repeat the name just asked about: it is compared first, since comparing two different
 * names of one length (c17, y17, s17, ...) reads their characters. (Ids never change once given, and a name not
 * found is not remembered: it may be added later, and is then remembered by whoever adds it.)
 */
function recentLookup(find: (v: string) => number): { lookup: (v: string) => number; remember: (v: string, id: number) => void } {
  let n0: string | undefined, n1: string | undefined, n2: string | undefined, n3: string | undefined;
  let i0 = -1, i1 = -1, i2 = -1, i3 = -1;
  const remember = (v: string, id: number): void => {
    n3 = n2; i3 = i2; n2 = n1; i2 = i1; n1 = n0; i1 = i0;
    n0 = v; i0 = id;
  };
  const lookup = (v: string): number => {
    if (v === n0) return i0;
    let k: number;
    // a name found again moves to the front; a new one goes there and the oldest drops out
    if (v === n1) { k = i1; n1 = n0; i1 = i0; } else if (v === n2) {
      k = i2; n2 = n1; i2 = i1; n1 = n0; i1 = i0;
    } else if (v === n3) {
      k = i3; n3 = n2; i3 = i2; n2 = n1; i2 = i1; n1 = n0; i1 = i0;
    } else {
      k = find(v);
      if (k < 0) return k;
      n3 = n2; i3 = i2; n2 = n1; i2 = i1; n1 = n0; i1 = i0;
    }
    n0 = v; i0 = k;
    return k;
  };
  return { lookup, remember };
}

/** The reader list of a value nobody reads any more (shared, never changed: adding a reader makes a new list). */
const NO_READERS: Node[] = [];

const constantOfNode = (p: Node | undefined): Tensor | undefined =>
  p && p.opType === 'Constant' && (p.domain === '' || p.domain === 'ai.onnx') ? constantNodeTensor(p) : undefined;

export function buildUseDef(graph: Graph): UseDef {
  const { nodes, tensors, ids, producer, init, flags, readers } = indexGraph(graph);
  const idIn = lastLookup(ids.id);
  const producerOf = (v: string): Node | undefined => {
    const id = idIn(v);
    return id < 0 || producer[id]! < 0 ? undefined : nodes[producer[id]!];
  };
  const initializerOf = (v: string): Tensor | undefined => {
    const id = idIn(v);
    return id < 0 || init[id]! < 0 ? undefined : tensors[init[id]!];
  };
  return {
    graph,
    producer: producerOf,
    consumers: (v) => {
      const id = idIn(v);
      return id < 0 ? [] : rowOf(readers, nodes, id);
    },
    isGraphOutput: (v) => { const id = idIn(v); return id >= 0 && (flags[id]! & IS_OUTPUT) !== 0; },
    isGraphInput: (v) => { const id = idIn(v); return id >= 0 && (flags[id]! & IS_INPUT) !== 0; },
    defines: (v) => { const id = idIn(v); return id >= 0 && (producer[id]! >= 0 || init[id]! >= 0 || (flags[id]! & IS_INPUT) !== 0); },
    initializer: initializerOf,
    constantTensor: (v) => initializerOf(v) ?? constantOfNode(producerOf(v)),
  };
}

/** A node's inputs and outputs as the index last saw them. */
export interface Wiring {
  inputs: readonly string[];
  outputs: readonly string[];
}

/**
 * A use-def index that follows edits of its graph: each change is told to it and updates only the values it
 * touches, so a run of many small folds never rebuilds the index of the whole graph. Between edits it answers
 * exactly as buildUseDef of the graph as it then is (reader lists in node order included).
 */
export interface EditableUseDef extends UseDef {
  /** How many nodes read the value (consumers(v).length without the list). */
  readerCount(v: string): number;
  /** Whether the name was ever a value name of the graph (an input, output, initializer or node input/output). */
  knows(v: string): boolean;
  /**
   * The index's number for a value name, -1 for a name it never knew (a number, once given, never changes). With
   * remember(), a caller that will ask about a name long after it last did is answered without the name being
   * hashed again.
   */
  idOf(v: string): number;
  /** Answer the next questions about `v` as about number `id`, which idOf(v) gave on this index. */
  remember(v: string, id: number): void;
  /** `n` left the graph (`was`: its wiring as last told, when it changed since). */
  removeNode(n: Node, was?: Wiring): void;
  /** `n` joined the graph, wired as it is now. */
  addNode(n: Node): void;
  /** `n` was wired as `was` and is now wired as it is. */
  rewire(n: Node, was: Wiring): void;
  /** The bodies of owner node `n` were edited: what they read from outside may have changed. */
  refreshBodyReads(n: Node): void;
  addInitializer(t: Tensor): void;
  removeInitializer(name: string): void;
  addGraphInput(name: string): void;
  /** Put reader lists that gained a reader back in node order; call once the graph's node list is final. */
  settle(): void;
}

export function editableUseDef(graph: Graph): EditableUseDef {
  const { nodes, tensors, ids, producer, init, flags, readers, bodies } = indexGraph(graph);
  const baseSize = ids.size;
  // Producer and initializer per id as plain arrays (edits set them); reader lists stay compressed rows until a
  // value's readers change; names new since the build get ids past the table's.
  // (The arrays have room for new names, a bias per layer or so: one that grows copies all of its 10^5 places.
  // Filled from the start: an array set at scattered ids, or one mostly holes that grows, turns into a slow
  // dictionary.)
  const room = baseSize + (nodes.length >> 1) + 16;
  const prod = new Array<Node | undefined>(room).fill(undefined);
  const inits = new Array<Tensor | undefined>(room).fill(undefined);
  for (let id = 0; id < baseSize; id++) {
    if (producer[id]! >= 0) prod[id] = nodes[producer[id]!];
    if (init[id]! >= 0) inits[id] = tensors[init[id]!];
  }
  // (a map: the names it holds are asked about again, and the engine keeps a string's hash with the string)
  const extra = new Map<string, number>();
  const flagOver = new Map<number, number>();
  const readOver = new Array<Node[] | undefined>(room).fill(undefined);
  const ownerReads = new Map<Node, string[]>();
  for (const [j, refs] of bodies) ownerReads.set(nodes[j]!, refs);
  const unsorted = new Set<number>();
  const tableId = ids.id;
  const { lookup: idIn, remember } = recentLookup((v: string): number => { const id = tableId(v); return id >= 0 ? id : (extra.get(v) ?? -1); });
  const idAdd = (v: string): number => {
    let id = idIn(v);
    if (id >= 0) return id;
    // a name new since the build (a bias a fold made): remembered by the look-up like any other
    id = baseSize + extra.size;
    extra.set(v, id);
    if (id >= prod.length) { prod.push(undefined); inits.push(undefined); readOver.push(undefined); }
    remember(v, id);
    return id;
  };
  const flagsAt = (id: number): number => flagOver.get(id) ?? (id < baseSize ? flags[id]! : 0);
  const readerCountAt = (id: number): number => {
    const o = readOver[id];
    if (o) return o.length;
    return id < baseSize ? readers.start[id + 1]! - readers.start[id]! : 0;
  };
  const readersAt = (id: number): Node[] => {
    const o = readOver[id];
    if (o) return o;
    return id < baseSize ? rowOf(readers, nodes, id) : [];
  };
  const producerOf = (v: string) => { const id = idIn(v); return id < 0 ? undefined : prod[id]; };
  const initializerOf = (v: string) => { const id = idIn(v); return id < 0 ? undefined : inits[id]; };
  /** The values a node reads, once each: its inputs and what its bodies read from outside. */
  const readSet = (inputs: readonly string[], n: Node): Set<string> => {
    const s = new Set<string>();
    for (const i of inputs) if (i) s.add(i);
    for (const r of ownerReads.get(n) ?? []) s.add(r);
    return s;
  };
  const dropReader = (v: string, n: Node) => {
    const id = idIn(v);
    if (id < 0) return;
    const count = readerCountAt(id);
    if (count === 0) return;
    // (most values have one reader: no list to filter then)
    if (count === 1) { if (readerAt0(id) === n) readOver[id] = NO_READERS; return; }
    readOver[id] = readersAt(id).filter((x) => x !== n);
  };
  const readerAt0 = (id: number): Node => readOver[id]?.[0] ?? nodes[readers.node[readers.start[id]!]!]!;
  const addReader = (v: string, n: Node) => {
    const id = idAdd(v);
    // (a first reader gets a list of its own size: it is kept, and a list grown by push holds room for 17)
    if (readerCountAt(id) === 0) { readOver[id] = [n]; return; }
    const list = readersAt(id);
    if (list.includes(n)) return;
    list.push(n);
    readOver[id] = list;
    unsorted.add(id);
  };
  const dropOutput = (o: string, n: Node) => {
    const id = idIn(o);
    if (id >= 0 && prod[id] === n) prod[id] = undefined;
  };
  const wire = (n: Node, inputs: readonly string[], outputs: readonly string[], on: boolean) => {
    for (const o of outputs) if (o) { if (on) prod[idAdd(o)] = n; else dropOutput(o, n); }
    // (reading a value twice is one read: adding checks the list, and dropping a reader twice is harmless)
    const reads = ownerReads.size > 0 && ownerReads.has(n) ? readSet(inputs, n) : inputs; // (most graphs own no bodies)
    for (const v of reads) if (v) { if (on) addReader(v, n); else dropReader(v, n); }
  };
  return {
    graph,
    producer: producerOf,
    // (a list the caller owns: an override copied, a list made from the compressed rows as it is)
    consumers: (v) => { const id = idIn(v); if (id < 0) return []; const o = readOver[id]; return o ? o.slice() : readersAt(id); },
    readerCount: (v) => { const id = idIn(v); return id < 0 ? 0 : readerCountAt(id); },
    knows: (v) => idIn(v) >= 0,
    idOf: idIn,
    remember,
    isGraphOutput: (v) => { const id = idIn(v); return id >= 0 && (flagsAt(id) & IS_OUTPUT) !== 0; },
    isGraphInput: (v) => { const id = idIn(v); return id >= 0 && (flagsAt(id) & IS_INPUT) !== 0; },
    defines: (v) => { const id = idIn(v); return id >= 0 && (prod[id] !== undefined || inits[id] !== undefined || (flagsAt(id) & IS_INPUT) !== 0); },
    initializer: initializerOf,
    constantTensor: (v) => initializerOf(v) ?? constantOfNode(producerOf(v)),
    removeNode(n, was) {
      wire(n, was?.inputs ?? n.inputs, was?.outputs ?? n.outputs, false);
      if (ownerReads.size > 0) ownerReads.delete(n);
    },
    addNode(n) {
      if (hasSubgraphs(n)) ownerReads.set(n, bodyReads(n));
      wire(n, n.inputs, n.outputs, true);
    },
    rewire(n, was) {
      for (const o of was.outputs) if (o && !n.outputs.includes(o)) dropOutput(o, n);
      for (const o of n.outputs) if (o) prod[idAdd(o)] = n;
      // (a node's inputs rarely repeat a value: compare the short lists directly)
      const bodyRefs = ownerReads.size > 0 ? ownerReads.get(n) : undefined;
      if (bodyRefs) {
        const before = readSet(was.inputs, n), after = readSet(n.inputs, n);
        for (const v of before) if (!after.has(v)) dropReader(v, n);
        for (const v of after) if (!before.has(v)) addReader(v, n);
        return;
      }
      for (const v of was.inputs) if (v && !n.inputs.includes(v)) dropReader(v, n);
      for (const v of n.inputs) if (v && !was.inputs.includes(v)) addReader(v, n);
    },
    refreshBodyReads(n) {
      const before = readSet(n.inputs, n);
      ownerReads.set(n, bodyReads(n));
      const after = readSet(n.inputs, n);
      for (const v of before) if (!after.has(v)) dropReader(v, n);
      for (const v of after) if (!before.has(v)) addReader(v, n);
    },
    addInitializer(t) { inits[idAdd(t.name)] = t; },
    removeInitializer(name) { const id = idIn(name); if (id >= 0) inits[id] = undefined; },
    addGraphInput(name) { const id = idAdd(name); flagOver.set(id, flagsAt(id) | IS_INPUT); },
    settle() {
      if (!unsorted.size) return;
      const at = new Map<Node, number>();
      graph.nodes.forEach((n, i) => at.set(n, i));
      for (const id of unsorted) readOver[id]?.sort((a, b) => (at.get(a) ?? -1) - (at.get(b) ?? -1));
      unsorted.clear();
    },
  };
}

/**
 * The readers of value `id` from the compressed rows, in a list of their exact number (asked for several times per
 * fold; a list grown by push from empty holds room for 17).
 */
function rowOf(readers: { start: Int32Array; node: Int32Array }, nodes: readonly Node[], id: number): Node[] {
  const start = readers.start[id]!, end = readers.start[id + 1]!;
  if (end - start === 1) return [nodes[readers.node[start]!]!];
  const out = new Array<Node>(end - start);
  for (let k = start; k < end; k++) out[k - start] = nodes[readers.node[k]!]!;
  return out;
}

/** Readers grouped by value (compressed rows), keeping node order within each value. */
// (csr's three loops are functions of their own, for the reason given above indexGraph)
function countRows(start: Int32Array, edgeValue: Int32Array, edges: number): void {
  for (let e = 0; e < edges; e++) start[edgeValue[e]! + 1]!++;
}

function prefixSums(start: Int32Array, values: number): void {
  for (let v = 0; v < values; v++) start[v + 1]! += start[v]!;
}

function fillRows(node: Int32Array, fill: Int32Array, edgeValue: Int32Array, edgeNode: Int32Array, edges: number): void {
  for (let e = 0; e < edges; e++) node[fill[edgeValue[e]!]!++] = edgeNode[e]!;
}

function csr(values: number, edgeValue: Int32Array, edgeNode: Int32Array, edges: number): { start: Int32Array; node: Int32Array } {
  const start = new Int32Array(values + 1);
  countRows(start, edgeValue, edges);
  prefixSums(start, values);
  const node = new Int32Array(edges);
  fillRows(node, start.slice(0, values), edgeValue, edgeNode, edges);
  return { start, node };
}
