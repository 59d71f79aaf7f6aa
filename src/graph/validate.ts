// Structural validation: every read value is defined, each value has one writer, no cycles, tensor data
// matches its dims and type. Errors name the graph, node and value.
import { PleatError } from '../errors.js';
import type { Graph, Model, Node, Tensor } from './ir.js';
import { elementCount, hasSubgraphs, storageKind, subgraphsOf } from './ir.js';
import { isKnownDataType, storedElementCount, dataTypeName } from './tensor.js';
import { topoOrder } from './topo.js';
import { nameTable, type NameTable } from './names.js';
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
 * Who writes each value of one graph, by name id: kind (0 none, 1 graph input, 2 initializer, 3 node) and index.
 * One name table serves every check of the graph, the order check included (a second table of the same names cost
 * as much).
 */
interface Writers {
  g: Graph;
  path: string;
  names: NameTable;
  kind: Uint8Array;
  index: Int32Array;
}

// Each loop over a graph's nodes or tensors is a function of its own. In one large function, the optimizing
// compiler compiled the whole of it again for each loop reached in turn, and the code it made for a 10^5-node graph
// fell back to the interpreter on each of the many small subgraphs: over half of a validation's work was
// compiling and interpreting (measured: 1.1 G instructions, 0.19 G of them in optimized code).

/** The description of a writer, for an error only. */
function describe(w: Writers, k: number, i: number): string {
  const g = w.g;
  return k === 1 ? `graph input '${g.inputs[i]!.name}'`
    : k === 2 ? `initializer '${g.initializers[i]!.name}'` : `node '${g.nodes[i]!.name || g.nodes[i]!.opType}'`;
}

function own(w: Writers, v: string, k: number, i: number, quietIfInput: boolean): number {
  const id = w.names.add(v);
  const was = w.kind[id]!;
  if (was !== 0) {
    if (quietIfInput && was === 1) return id; // an initializer giving a graph input its default
    throw new PleatError('bad-model', `${w.path}: value '${v}' is written by both ${describe(w, was, w.index[id]!)} and ${describe(w, k, i)}`);
  }
  w.kind[id] = k;
  w.index[id] = i;
  return id;
}

/** Values a graph's nodes write, counting each output slot (a bound on the names the graph defines). */
function countWrites(nodes: readonly Node[]): number {
  let n = 0;
  for (let j = 0; j < nodes.length; j++) n += nodes[j]!.outputs.length;
  return n;
}

/** Where each node's outputs and inputs start in the flat id lists; the lists' lengths. */
function slotStarts(nodes: readonly Node[], outStart: Int32Array, readStart: Int32Array): void {
  let writes = 0, reads = 0;
  for (let j = 0; j < nodes.length; j++) {
    outStart[j] = writes; readStart[j] = reads;
    writes += nodes[j]!.outputs.length; reads += nodes[j]!.inputs.length;
  }
  outStart[nodes.length] = writes; readStart[nodes.length] = reads;
}

function ownInputs(w: Writers, inputIds: Int32Array): void {
  const inputs = w.g.inputs;
  for (let i = 0; i < inputs.length; i++) inputIds[i] = own(w, inputs[i]!.name, 1, i, false);
}

function ownInitializers(w: Writers, tensorIds: Int32Array, externalLoaded: boolean): void {
  const inits = w.g.initializers;
  for (let i = 0; i < inits.length; i++) {
    const t = inits[i]!;
    checkTensor(t, w.path, externalLoaded);
    tensorIds[i] = own(w, t.name, 2, i, true); // two initializers of one name are refused: runtimes bind different ones
  }
}

/** Each node's outputs owned and its tensor attributes checked; whether any node carries a subgraph. */
function ownNodeOutputs(w: Writers, outIds: Int32Array, externalLoaded: boolean): boolean {
  const nodes = w.g.nodes;
  let nested = false;
  for (let j = 0, o = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    const outs = n.outputs;
    for (let k = 0; k < outs.length; k++) outIds[o++] = outs[k] ? own(w, outs[k]!, 3, j, false) : -1;
    const attrs = n.attributes;
    for (let k = 0; k < attrs.length; k++) {
      const v = attrs[k]!.value;
      if (v.type === 'TENSOR') checkTensor(v.t, `${w.path} node '${n.name || n.opType}'`, externalLoaded);
      else if (v.type === 'GRAPH' || v.type === 'GRAPHS') nested = true;
    }
  }
  return nested;
}

/** What readIds found: a value read from an enclosing graph; a node reading a value written at or after it. */
const READS_OUTER = 1, READS_AHEAD = 2;

/**
 * Every read value is defined; and when every node reads only values written before it (the common case, told by
 * the same look-ups) there is no cycle, so the topological sort is needed only otherwise.
 */
function readIdsOf(w: Writers, readIds: Int32Array, outerHas: (v: string) => boolean, nested: boolean): number {
  const nodes = w.g.nodes, names = w.names, kind = w.kind, index = w.index;
  let found = 0;
  for (let j = 0, e = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    const ins = n.inputs;
    for (let k = 0; k < ins.length; k++) {
      const i = ins[k]!;
      if (!i) { readIds[e++] = -1; continue; }
      const id = readIds[e++] = names.id(i);
      if (id < 0) {
        if (!outerHas(i)) {
          throw new PleatError('bad-model', `${w.path}: node '${n.name || n.opType}' reads '${i}', which no node, input or initializer defines`);
        }
        found |= READS_OUTER;
      } else if (kind[id] === 3 && index[id]! >= j) found |= READS_AHEAD;
    }
    // a subgraph's reads of this graph's values are the node's needs too (topoOrder counts them the same way)
    if ((found & READS_AHEAD) === 0 && nested && hasSubgraphs(n)) {
      for (const sg of subgraphsOf(n)) {
        for (const v of outerRefs(sg)) {
          const id = names.id(v);
          if (id >= 0 && kind[id] === 3 && index[id]! >= j) found |= READS_AHEAD;
        }
      }
    }
  }
  return found;
}

/**
 * `outerHas` answers for the enclosing graphs: a subgraph may read their values. It is a lookup, not a copy of
 * the outer names, so a graph with many If/Loop bodies costs time linear in its size.
 */
function validateGraph(g: Graph, outerHas: (v: string) => boolean, path: string, externalLoaded: boolean): void {
  const nodes = g.nodes;
  const bound = g.inputs.length + g.initializers.length + countWrites(nodes);
  // (the table grows only when a taker of the kept ids adds names: see kept-ids.ts)
  const w: Writers = { g, path, names: nameTable(bound, true), kind: new Uint8Array(bound), index: new Int32Array(bound) };
  // the ids found on the way, kept for the use-def index (kept-ids.ts) when the graph reads nothing from outside
  const inputIds = new Int32Array(g.inputs.length);
  const tensorIds = new Int32Array(g.initializers.length);
  const outStart = new Int32Array(nodes.length + 1), readStart = new Int32Array(nodes.length + 1);
  slotStarts(nodes, outStart, readStart);
  const outIds = new Int32Array(outStart[nodes.length]!), readIds = new Int32Array(readStart[nodes.length]!);
  ownInputs(w, inputIds);
  ownInitializers(w, tensorIds, externalLoaded);
  const nested = ownNodeOutputs(w, outIds, externalLoaded);
  const names = w.names;
  const has = (v: string): boolean => names.id(v) >= 0 || outerHas(v);
  const found = readIdsOf(w, readIds, outerHas, nested);
  let outer = (found & READS_OUTER) !== 0;
  if ((found & READS_AHEAD) !== 0) topoOrder(g); // throws on a cycle
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
