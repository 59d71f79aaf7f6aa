// Topological order of a graph's nodes (Kahn's algorithm, stable: ties keep file order).
import { PleatError } from '../errors.js';
import type { Graph, Node } from './ir.js';
import { hasSubgraphs, subgraphsOf } from './ir.js';
import { outerRefs } from './usedef.js';
import { nameTable } from './names.js';

/** Values a node needs before it can run: its inputs and its subgraphs' outer references. */
export function nodeNeeds(n: Node): string[] {
  const needs = n.inputs.filter((i) => i !== '');
  for (const sg of subgraphsOf(n)) needs.push(...outerRefs(sg));
  return needs;
}

/** Needs of a node without building a list for the many nodes that carry no subgraph. */
function needsOf(n: Node): readonly string[] {
  return hasSubgraphs(n) ? nodeNeeds(n) : n.inputs;
}

export function topoOrder(g: Graph): Node[] {
  const nodes = g.nodes;
  let outputs = 0;
  for (const n of nodes) outputs += n.outputs.length;
  // value -> producing node, through a name table (ids) and a flat array: no Map of millions of names
  const names = nameTable(outputs);
  const producer = new Int32Array(outputs).fill(-1);
  nodes.forEach((n, i) => { for (const o of n.outputs) if (o) producer[names.add(o)] = i; });
  const producerOf = (v: string): number => {
    if (!v) return -1;
    const id = names.id(v);
    return id < 0 ? -1 : producer[id]!;
  };
  // The common case, checked without building anything: every node's producers come before it.
  let inFileOrder = true;
  for (let i = 0; i < nodes.length && inFileOrder; i++) {
    for (const v of needsOf(nodes[i]!)) if (producerOf(v) >= i) { inFileOrder = false; break; }
  }
  if (inFileOrder) return [...nodes];
  const indeg = new Array<number>(nodes.length).fill(0);
  const succ: number[][] = nodes.map(() => []);
  nodes.forEach((n, i) => {
    for (const v of new Set(needsOf(n))) {
      const p = producerOf(v);
      if (p >= 0) { indeg[i]!++; succ[p]!.push(i); }
    }
  });
  // A min-heap would be faster for huge graphs; a sorted ready queue by index keeps file order for ties.
  const ready: number[] = [];
  indeg.forEach((d, i) => { if (d === 0) ready.push(i); });
  const order: Node[] = [];
  let head = 0;
  ready.sort((a, b) => a - b);
  while (head < ready.length) {
    const i = ready[head++]!;
    order.push(nodes[i]!);
    for (const s of succ[i]!) if (--indeg[s]! === 0) ready.push(s);
  }
  if (order.length !== nodes.length) {
    const stuck = nodes.find((_, i) => indeg[i]! > 0)!;
    throw new PleatError('bad-model', `graph '${g.name}' has a cycle through node '${stuck.name || stuck.opType}'`);
  }
  return order;
}
