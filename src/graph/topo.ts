// Topological order of a graph's nodes (Kahn's algorithm, stable: ties keep file order).
import { PleatError } from '../errors.js';
import type { Graph, Node } from './ir.js';
import { subgraphsOf } from './ir.js';
import { outerRefs } from './usedef.js';

/** Values a node needs before it can run: its inputs and its subgraphs' outer references. */
export function nodeNeeds(n: Node): string[] {
  const needs = n.inputs.filter((i) => i !== '');
  for (const sg of subgraphsOf(n)) needs.push(...outerRefs(sg));
  return needs;
}

export function topoOrder(g: Graph): Node[] {
  const producer = new Map<string, number>();
  g.nodes.forEach((n, i) => n.outputs.forEach((o) => { if (o) producer.set(o, i); }));
  const indeg = new Array<number>(g.nodes.length).fill(0);
  const succ: number[][] = g.nodes.map(() => []);
  g.nodes.forEach((n, i) => {
    for (const v of new Set(nodeNeeds(n))) {
      const p = producer.get(v);
      if (p !== undefined) { indeg[i]!++; succ[p]!.push(i); }
    }
  });
  // A min-heap would be faster for huge graphs; a sorted ready queue by index keeps file order for ties.
  const ready: number[] = [];
  indeg.forEach((d, i) => { if (d === 0) ready.push(i); });
  const order: Node[] = [];
  let head = 0;
  const inFileOrder = g.nodes.every((n, i) => nodeNeeds(n).every((v) => (producer.get(v) ?? -1) < i));
  if (inFileOrder) return [...g.nodes];
  ready.sort((a, b) => a - b);
  while (head < ready.length) {
    const i = ready[head++]!;
    order.push(g.nodes[i]!);
    for (const s of succ[i]!) if (--indeg[s]! === 0) ready.push(s);
  }
  if (order.length !== g.nodes.length) {
    const stuck = g.nodes.find((_, i) => indeg[i]! > 0)!;
    throw new PleatError('bad-model', `graph '${g.name}' has a cycle through node '${stuck.name || stuck.opType}'`);
  }
  return order;
}
