// Producer and consumer index of a graph. Reads from inside a subgraph (If branches, Loop/Scan bodies) of a
// value defined outside it count as reads by the node that owns the subgraph: changing that value would
// change what the subgraph sees.
import type { Graph, Node, Tensor } from './ir.js';
import { attrTensor, subgraphsOf } from './ir.js';

export interface UseDef {
  graph: Graph;
  producer(value: string): Node | undefined;
  consumers(value: string): Node[];
  isGraphOutput(value: string): boolean;
  isGraphInput(value: string): boolean;
  initializer(value: string): Tensor | undefined;
  /** An initializer or the tensor of a Constant node (value attribute only; other forms via constantOf). */
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

export function buildUseDef(graph: Graph): UseDef {
  const producers = new Map<string, Node>();
  const readers = new Map<string, Node[]>();
  const addReader = (v: string, n: Node) => {
    const list = readers.get(v);
    if (!list) readers.set(v, [n]);
    else if (list[list.length - 1] !== n) list.push(n);
  };
  for (const n of graph.nodes) {
    for (const o of n.outputs) if (o) producers.set(o, n);
    for (const i of n.inputs) if (i) addReader(i, n);
    for (const sg of subgraphsOf(n)) for (const r of outerRefs(sg)) addReader(r, n);
  }
  const outputs = new Set(graph.outputs.map((o) => o.name));
  const inputs = new Set(graph.inputs.map((o) => o.name));
  const inits = new Map(graph.initializers.map((t) => [t.name, t]));
  return {
    graph,
    producer: (v) => producers.get(v),
    consumers: (v) => readers.get(v) ?? [],
    isGraphOutput: (v) => outputs.has(v),
    isGraphInput: (v) => inputs.has(v),
    initializer: (v) => inits.get(v),
    constantTensor: (v) => {
      const t = inits.get(v);
      if (t) return t;
      const p = producers.get(v);
      return p && p.opType === 'Constant' && (p.domain === '' || p.domain === 'ai.onnx') ? attrTensor(p, 'value') : undefined;
    },
  };
}
