// Structural validation: every read value is defined, each value has one writer, no cycles, tensor data
// matches its dims and type. Errors name the graph, node and value.
import { PleatError } from '../errors.js';
import type { Graph, Model, Tensor } from './ir.js';
import { elementCount } from './ir.js';
import { isKnownDataType, storedElementCount, dataTypeName } from './tensor.js';
import { topoOrder } from './topo.js';
import { nameTable } from './names.js';

function checkTensor(t: Tensor, where: string): void {
  if (!isKnownDataType(t.dataType)) {
    throw new PleatError('bad-model', `${where}: tensor '${t.name}' has unknown data type ${t.dataType}`);
  }
  if (t.storage.kind === 'string_data' || t.dataType === 8) return;
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
function validateGraph(g: Graph, outerHas: (v: string) => boolean, path: string): void {
  // Who writes each value, as (kind, index) by name id: the description is only built for an error.
  let bound = g.inputs.length + g.initializers.length;
  for (const n of g.nodes) bound += n.outputs.length;
  const names = nameTable(bound);
  const kind = new Uint8Array(bound); // 0 none, 1 graph input, 2 initializer, 3 node
  const index = new Int32Array(bound);
  const describe = (k: number, i: number): string => k === 1 ? `graph input '${g.inputs[i]!.name}'`
    : k === 2 ? `initializer '${g.initializers[i]!.name}'` : `node '${g.nodes[i]!.name || g.nodes[i]!.opType}'`;
  const own = (v: string, k: number, i: number, quietIfInput = false) => {
    const id = names.add(v);
    if (kind[id] !== 0) {
      if (quietIfInput && kind[id] === 1) return; // an initializer giving a graph input its default
      throw new PleatError('bad-model', `${path}: value '${v}' is written by both ${describe(kind[id]!, index[id]!)} and ${describe(k, i)}`);
    }
    kind[id] = k;
    index[id] = i;
  };
  g.inputs.forEach((v, i) => own(v.name, 1, i));
  g.initializers.forEach((t, i) => {
    checkTensor(t, path);
    own(t.name, 2, i, true); // two initializers of one name are refused: runtimes bind different ones
  });
  g.nodes.forEach((n, j) => {
    for (const o of n.outputs) if (o) own(o, 3, j);
    for (const a of n.attributes) {
      if (a.value.type === 'TENSOR') checkTensor(a.value.t, `${path} node '${n.name || n.opType}'`);
    }
  });
  const has = (v: string): boolean => names.id(v) >= 0 || outerHas(v);
  for (const n of g.nodes) {
    for (const i of n.inputs) {
      if (i && !has(i)) {
        throw new PleatError('bad-model', `${path}: node '${n.name || n.opType}' reads '${i}', which no node, input or initializer defines`);
      }
    }
  }
  topoOrder(g); // throws on a cycle
  for (const o of g.outputs) {
    if (!has(o.name)) throw new PleatError('bad-model', `${path}: graph output '${o.name}' is never computed`);
  }
  for (const n of g.nodes) {
    for (const a of n.attributes) {
      const sgs = a.value.type === 'GRAPH' ? [a.value.g] : a.value.type === 'GRAPHS' ? a.value.graphs : [];
      sgs.forEach((sg, k) => validateGraph(sg, has, `${path}/${n.name || n.opType}.${a.name}${sgs.length > 1 ? `[${k}]` : ''}`));
    }
  }
}

export function validateModel(m: Model): void {
  validateGraph(m.graph, () => false, m.graph.name ? `graph '${m.graph.name}'` : 'main graph');
}
