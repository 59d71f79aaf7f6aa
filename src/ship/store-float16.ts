// --store float16: keep linear layers' weights and biases in half precision. Each converted initializer is
// stored as float16 under a new name and cast back to float32 where the graph reads it, so every operator
// still sees the types the model declares. A tensor with a value beyond float16's range stays float32.
import type { Graph, Model, Node, Tensor } from '../graph/ir.js';
import { DataType, subgraphsOf } from '../graph/ir.js';
import { FLOAT16_MAX, makeTensor, tensorByteSize, tensorToFloat64 } from '../graph/tensor.js';
import { touch } from '../graph/edit.js';

const WEIGHT_READERS = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);

export interface Float16Result {
  tensorsConverted: number;
  keptFloat32: string[];
  bytesBefore: number;
  bytesAfter: number;
}

function allNames(g: Graph, into: Set<string>): void {
  for (const t of g.initializers) into.add(t.name);
  for (const v of g.inputs) into.add(v.name);
  for (const n of g.nodes) {
    n.outputs.forEach((o) => into.add(o));
    if (n.name) into.add(n.name);
    subgraphsOf(n).forEach((sg) => allNames(sg, into));
  }
}

function convertGraph(g: Graph, taken: Set<string>, r: Float16Result): void {
  const readers = new Map<string, Node[]>();
  for (const n of g.nodes) n.inputs.forEach((i) => { if (i) readers.set(i, [...(readers.get(i) ?? []), n]); });
  const inputs = new Set(g.inputs.map((v) => v.name));
  const casts: Node[] = [];
  g.initializers = g.initializers.map((t): Tensor => {
    if (t.dataType !== DataType.FLOAT || inputs.has(t.name)) return t;
    const rs = readers.get(t.name) ?? [];
    if (!rs.length || !rs.every((n) => WEIGHT_READERS.has(n.opType) && (n.domain === '' || n.domain === 'ai.onnx') && n.inputs.indexOf(t.name) >= 1)) return t;
    const values = tensorToFloat64(t);
    if (values.some((v) => Math.abs(v) > FLOAT16_MAX)) { r.keptFloat32.push(t.name); return t; }
    let name = `${t.name}.float16`;
    for (let k = 2; taken.has(name); k++) name = `${t.name}.float16.${k}`;
    taken.add(name);
    const half = makeTensor(name, t.dims, DataType.FLOAT16, values);
    r.tensorsConverted++;
    r.bytesBefore += tensorByteSize(t);
    r.bytesAfter += tensorByteSize(half);
    casts.push({
      name: `${name}.cast`, opType: 'Cast', domain: '', inputs: [name], outputs: [t.name], docString: '', extra: [],
      attributes: [{ name: 'to', value: { type: 'INT', i: DataType.FLOAT }, docString: '', refAttrName: '', extra: [] }],
    });
    return half;
  });
  if (casts.length) { g.nodes = [...casts, ...g.nodes]; touch(g); }
  for (const n of g.nodes) subgraphsOf(n).forEach((sg) => convertGraph(sg, taken, r));
}

/** Convert in place; returns what changed. */
export function storeFloat16(model: Model): Float16Result {
  const r: Float16Result = { tensorsConverted: 0, keptFloat32: [], bytesBefore: 0, bytesAfter: 0 };
  const taken = new Set<string>();
  allNames(model.graph, taken);
  convertGraph(model.graph, taken, r);
  return r;
}
