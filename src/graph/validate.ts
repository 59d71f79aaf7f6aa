// Structural validation: every read value is defined, each value has one writer, no cycles, tensor data
// matches its dims and type. Errors name the graph, node and value.
import { PleatError } from '../errors.js';
import type { Graph, Model, Tensor } from './ir.js';
import { elementCount, hasSubgraphs, storageKind, subgraphsOf } from './ir.js';
import { isKnownDataType, storedElementCount, dataTypeName } from './tensor.js';
import { topoOrder } from './topo.js';
import { nameTable } from './names.js';
import { keepIds } from './kept-ids.js';
import { outerRefs } from './usedef.js';

function checkTensor(t: Tensor, where: string, externalLoaded: boolean): void {
  if (!isKnownDataType(t.dataType)) {
    throw new PleatError('bad-model', `${where}: tensor '${t.name}' has unknown data type ${t.dataType}`);
  }
  const kind = storageKind(t); // not t.storage: a tensor read from a file would make a view of its bytes
  if (kind === 'string_data' || t.dataType === 8) return;
  if (kind === 'external' && !externalLoaded) return; // structure only: the bytes stay on disk
  const need = elementCount(t.dims);
  const have = storedElementCount(t);
  if (have < need) {
    throw new PleatError('bad-model', `${where}: tensor '${t.name}' (${dataTypeName(t.dataType)}) holds ${have} elements but its dims [${t.dims.join(',')}] need ${need}`);
  }
}

/**
 * `outerHas` answers for the enclosing graphs: a subgraph may read their values. It is a lookup, not a copy of
 * the outer names, so a graph with many If/Loop bodies costs time linear in its size.
 */
function validateGraph(g: Graph, outerHas: (v: string) => boolean, path: string, externalLoaded: boolean): void {
  // Who writes each value, as (kind, index) by name id: the description is only built for an error. One name
  // table serves every check below, the order check included (a second table of the same names cost as much).
  const nodes = g.nodes;
  let bound = g.inputs.length + g.initializers.length;
  for (let j = 0; j < nodes.length; j++) bound += nodes[j]!.outputs.length;
  const names = nameTable(bound, true); // (grows only when a taker of the kept ids adds names: see kept-ids.ts)
  const kind = new Uint8Array(bound); // 0 none, 1 graph input, 2 initializer, 3 node
  const index = new Int32Array(bound);
  const describe = (k: number, i: number): string => k === 1 ? `graph input '${g.inputs[i]!.name}'`
    : k === 2 ? `initializer '${g.initializers[i]!.name}'` : `node '${nodes[i]!.name || nodes[i]!.opType}'`;
  const own = (v: string, k: number, i: number, quietIfInput = false): number => {
    const id = names.add(v);
    if (kind[id] !== 0) {
      if (quietIfInput && kind[id] === 1) return id; // an initializer giving a graph input its default
      throw new PleatError('bad-model', `${path}: value '${v}' is written by both ${describe(kind[id]!, index[id]!)} and ${describe(k, i)}`);
    }
    kind[id] = k;
    index[id] = i;
    return id;
  };
  // the ids found on the way, kept for the use-def index (kept-ids.ts) when the graph reads nothing from outside
  const inputIds = new Int32Array(g.inputs.length);
  const tensorIds = new Int32Array(g.initializers.length);
  const outStart = new Int32Array(nodes.length + 1), readStart = new Int32Array(nodes.length + 1);
  let writes = 0, reads = 0;
  for (let j = 0; j < nodes.length; j++) {
    outStart[j] = writes; readStart[j] = reads;
    writes += nodes[j]!.outputs.length; reads += nodes[j]!.inputs.length;
  }
  outStart[nodes.length] = writes; readStart[nodes.length] = reads;
  const outIds = new Int32Array(writes), readIds = new Int32Array(reads);
  let outer = false;
  g.inputs.forEach((v, i) => { inputIds[i] = own(v.name, 1, i); });
  g.initializers.forEach((t, i) => {
    checkTensor(t, path, externalLoaded);
    tensorIds[i] = own(t.name, 2, i, true); // two initializers of one name are refused: runtimes bind different ones
  });
  let nested = false;
  for (let j = 0, w = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    const outs = n.outputs;
    for (let k = 0; k < outs.length; k++) outIds[w++] = outs[k] ? own(outs[k]!, 3, j) : -1;
    const attrs = n.attributes;
    for (let k = 0; k < attrs.length; k++) {
      const v = attrs[k]!.value;
      if (v.type === 'TENSOR') checkTensor(v.t, `${path} node '${n.name || n.opType}'`, externalLoaded);
      else if (v.type === 'GRAPH' || v.type === 'GRAPHS') nested = true;
    }
  }
  const has = (v: string): boolean => names.id(v) >= 0 || outerHas(v);
  // Every read value is defined; and when every node reads only values written before it (the common case,
  // told by the same look-ups) there is no cycle, so the topological sort is needed only otherwise.
  let inFileOrder = true;
  for (let j = 0, e = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    const ins = n.inputs;
    for (let k = 0; k < ins.length; k++) {
      const i = ins[k]!;
      if (!i) { readIds[e++] = -1; continue; }
      const id = readIds[e++] = names.id(i);
      if (id < 0) {
        if (!outerHas(i)) {
          throw new PleatError('bad-model', `${path}: node '${n.name || n.opType}' reads '${i}', which no node, input or initializer defines`);
        }
        outer = true;
      } else if (kind[id] === 3 && index[id]! >= j) inFileOrder = false;
    }
    // a subgraph's reads of this graph's values are the node's needs too (topoOrder counts them the same way)
    if (inFileOrder && nested && hasSubgraphs(n)) {
      for (const sg of subgraphsOf(n)) {
        for (const v of outerRefs(sg)) {
          const id = names.id(v);
          if (id >= 0 && kind[id] === 3 && index[id]! >= j) inFileOrder = false;
        }
      }
    }
  }
  if (!inFileOrder) topoOrder(g); // throws on a cycle
  const outputIds = new Int32Array(g.outputs.length);
  g.outputs.forEach((o, k) => {
    if (!has(o.name)) throw new PleatError('bad-model', `${path}: graph output '${o.name}' is never computed`);
    outputIds[k] = names.id(o.name);
    if (outputIds[k]! < 0) outer = true;
  });
  if (!outer) {
    keepIds(g, {
      table: names, nodes: nodes.slice(), outStart, outIds, readStart, readIds, tensors: g.initializers.slice(), tensorIds,
      inputs: g.inputs.slice(), inputIds, outputs: g.outputs.slice(), outputIds,
    });
  }
  if (!nested) return;
  for (const n of nodes) {
    for (const a of n.attributes) {
      const sgs = a.value.type === 'GRAPH' ? [a.value.g] : a.value.type === 'GRAPHS' ? a.value.graphs : [];
      sgs.forEach((sg, k) => validateGraph(sg, has, `${path}/${n.name || n.opType}.${a.name}${sgs.length > 1 ? `[${k}]` : ''}`, externalLoaded));
    }
  }
}

/** `externalLoaded: false` when external tensors were left on disk (their sizes are not checked then). */
export function validateModel(m: Model, opts: { externalLoaded?: boolean } = {}): void {
  validateGraph(m.graph, () => false, m.graph.name ? `graph '${m.graph.name}'` : 'main graph', opts.externalLoaded ?? true);
}
