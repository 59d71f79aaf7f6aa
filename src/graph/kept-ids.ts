// The value-name ids validation gave a graph, kept for the use-def index built next (src/graph/usedef.ts), so a
// graph read from a file has its names hashed once rather than once by each. Hashing every name occurrence into
// a table larger than the processor's cache is most of what either costs on a graph of 10^5 nodes.
//
// Kept ids are only taken after checking that the graph still has exactly the nodes, initializers, inputs and
// outputs they were made from, with the same names in the same places (a string compare per occurrence, which
// is a pointer compare for the strings the reader shares). Any difference, and the caller builds its own ids.
import type { Graph, Node, Tensor, ValueInfo } from './ir.js';
import type { NameTable } from './names.js';

export interface KeptIds {
  /** Every name of the graph (a table that may grow: a taker adds names the graph reads from outside). */
  table: NameTable;
  nodes: readonly Node[];
  /** Node j's outputs are outIds[outStart[j] .. outStart[j + 1]), its inputs readIds[readStart[j] ..]; -1: ''. */
  outStart: Int32Array;
  outIds: Int32Array;
  readStart: Int32Array;
  readIds: Int32Array;
  tensors: readonly Tensor[];
  tensorIds: Int32Array;
  inputs: readonly ValueInfo[];
  inputIds: Int32Array;
  outputs: readonly ValueInfo[];
  outputIds: Int32Array;
}

const kept = new WeakMap<Graph, KeptIds>();

export function keepIds(g: Graph, ids: KeptIds): void {
  kept.set(g, ids);
}

function sameNames(table: NameTable, names: readonly string[], ids: Int32Array, at: number): boolean {
  for (let k = 0; k < names.length; k++) {
    const v = names[k]!, id = ids[at + k]!;
    if (id < 0 ? v !== '' : table.nameOf(id) !== v) return false;
  }
  return true;
}

function sameValues(table: NameTable, now: readonly { name: string }[], then: readonly { name: string }[], ids: Int32Array): boolean {
  if (now.length !== then.length) return false;
  for (let k = 0; k < now.length; k++) if (now[k] !== then[k] || table.nameOf(ids[k]!) !== now[k]!.name) return false;
  return true;
}

/** The ids kept for `g`, if the graph is still exactly as they describe it (else undefined). */
export function keptIds(g: Graph): KeptIds | undefined {
  const k = kept.get(g);
  if (!k) return undefined;
  const nodes = g.nodes, table = k.table;
  let fits = nodes.length === k.nodes.length && sameValues(table, g.initializers, k.tensors, k.tensorIds)
    && sameValues(table, g.inputs, k.inputs, k.inputIds) && sameValues(table, g.outputs, k.outputs, k.outputIds);
  for (let j = 0; fits && j < nodes.length; j++) {
    const n = nodes[j]!;
    const o = k.outStart[j]!, r = k.readStart[j]!;
    fits = n === k.nodes[j] && n.outputs.length === k.outStart[j + 1]! - o && n.inputs.length === k.readStart[j + 1]! - r
      && sameNames(table, n.outputs, k.outIds, o) && sameNames(table, n.inputs, k.readIds, r);
  }
  if (!fits) kept.delete(g);
  return fits ? k : undefined;
}
