// A view of a model with some tensors swapped for others, leaving the model itself untouched: graphs, nodes and
// attributes on the way to a swapped tensor are copied, everything else is shared. Used to run "what if the
// weights were rounded" without a second read of the file or a deep copy of every weight.
import type { Attribute, Graph, Model, Node, Tensor } from './ir.js';

/** `swap` returns the tensor to use instead, or undefined to keep it. */
export type TensorSwap = (t: Tensor) => Tensor | undefined;

function swapAttribute(a: Attribute, swap: TensorSwap): Attribute {
  const v = a.value;
  switch (v.type) {
    case 'TENSOR': { const t = swap(v.t); return t ? { ...a, value: { type: 'TENSOR', t } } : a; }
    case 'TENSORS': {
      const ts = v.tensors.map((t) => swap(t) ?? t);
      return ts.some((t, i) => t !== v.tensors[i]) ? { ...a, value: { type: 'TENSORS', tensors: ts } } : a;
    }
    case 'GRAPH': { const g = swapGraph(v.g, swap); return g !== v.g ? { ...a, value: { type: 'GRAPH', g } } : a; }
    case 'GRAPHS': {
      const gs = v.graphs.map((g) => swapGraph(g, swap));
      return gs.some((g, i) => g !== v.graphs[i]) ? { ...a, value: { type: 'GRAPHS', graphs: gs } } : a;
    }
    default: return a;
  }
}

function swapNode(n: Node, swap: TensorSwap): Node {
  const attrs = n.attributes.map((a) => swapAttribute(a, swap));
  // (origin named: a node read from a file holds it on its class, where a spread does not reach)
  return attrs.some((a, i) => a !== n.attributes[i]) ? { ...n, attributes: attrs, origin: n.origin } : n;
}

function swapGraph(g: Graph, swap: TensorSwap): Graph {
  const inits = g.initializers.map((t) => swap(t) ?? t);
  const nodes = g.nodes.map((n) => swapNode(n, swap));
  const changed = inits.some((t, i) => t !== g.initializers[i]) || nodes.some((n, i) => n !== g.nodes[i]);
  return changed ? { ...g, initializers: inits, nodes } : g;
}

/** The model with each tensor `swap` replaces swapped; `model` is not changed. */
export function withSwappedTensors(model: Model, swap: TensorSwap): Model {
  const g = swapGraph(model.graph, swap);
  return g === model.graph ? model : { ...model, graph: g };
}
