// Producer and consumer index of a graph. Reads from inside a subgraph (If branches, Loop/Scan bodies) of a
// value defined outside it count as reads by the node that owns the subgraph: changing that value would
// change what the subgraph sees.
import { constantNodeTensor } from './constants.js';
import type { Graph, Node, Tensor } from './ir.js';
import { hasSubgraphs, subgraphsOf } from './ir.js';
import { nameTable } from './names.js';

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
export function buildUseDef(graph: Graph): UseDef {
  const nodes = graph.nodes.slice(); // the index answers for the graph as it was built, as a Map of nodes would
  const tensors = graph.initializers.slice();
  const bodies = new Map<number, string[]>();
  let bound = tensors.length + graph.inputs.length + graph.outputs.length;
  let reads = 0;
  for (let j = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    bound += n.inputs.length + n.outputs.length;
    reads += n.inputs.length;
    if (hasSubgraphs(n)) {
      const refs = bodyReads(n);
      bodies.set(j, refs);
      bound += refs.length;
      reads += refs.length;
    }
  }
  const ids = nameTable(bound);
  const idOf = ids.add;
  const producer = new Int32Array(bound).fill(-1);
  const init = new Int32Array(bound).fill(-1);
  const flags = new Uint8Array(bound);
  const lastReader = new Int32Array(bound).fill(-1);
  const edgeValue = new Int32Array(reads);
  const edgeNode = new Int32Array(reads);
  let edges = 0;
  const addReader = (v: string, j: number) => {
    const id = idOf(v);
    if (lastReader[id] === j) return; // a node reading a value twice is one reader
    lastReader[id] = j;
    edgeValue[edges] = id;
    edgeNode[edges++] = j;
  };
  for (let j = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    for (const o of n.outputs) if (o) producer[idOf(o)] = j;
    for (const i of n.inputs) if (i) addReader(i, j);
    const refs = bodies.get(j);
    if (refs) for (const r of refs) addReader(r, j);
  }
  for (const o of graph.outputs) flags[idOf(o.name)]! |= IS_OUTPUT;
  for (const v of graph.inputs) flags[idOf(v.name)]! |= IS_INPUT;
  for (let k = 0; k < tensors.length; k++) init[idOf(tensors[k]!.name)] = k;
  const readers = csr(ids.size, edgeValue, edgeNode, edges);
  const idIn = ids.id;
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
      if (id < 0) return [];
      const out: Node[] = [];
      for (let k = readers.start[id]!, end = readers.start[id + 1]!; k < end; k++) out.push(nodes[readers.node[k]!]!);
      return out;
    },
    isGraphOutput: (v) => { const id = idIn(v); return id >= 0 && (flags[id]! & IS_OUTPUT) !== 0; },
    isGraphInput: (v) => { const id = idIn(v); return id >= 0 && (flags[id]! & IS_INPUT) !== 0; },
    defines: (v) => { const id = idIn(v); return id >= 0 && (producer[id]! >= 0 || init[id]! >= 0 || (flags[id]! & IS_INPUT) !== 0); },
    initializer: initializerOf,
    constantTensor: (v) => {
      const t = initializerOf(v);
      if (t) return t;
      const p = producerOf(v);
      return p && p.opType === 'Constant' && (p.domain === '' || p.domain === 'ai.onnx') ? constantNodeTensor(p) : undefined;
    },
  };
}

/** Readers grouped by value (compressed rows), keeping node order within each value. */
function csr(values: number, edgeValue: Int32Array, edgeNode: Int32Array, edges: number): { start: Int32Array; node: Int32Array } {
  const start = new Int32Array(values + 1);
  for (let e = 0; e < edges; e++) start[edgeValue[e]! + 1]!++;
  for (let v = 0; v < values; v++) start[v + 1]! += start[v]!;
  const fill = start.slice(0, values);
  const node = new Int32Array(edges);
  for (let e = 0; e < edges; e++) node[fill[edgeValue[e]!]!++] = edgeNode[e]!;
  return { start, node };
}
