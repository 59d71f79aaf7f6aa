// --store float16: keep linear layers' weights and biases in half precision. Each converted initializer is
// stored as float16 under a new name and cast back to float32 where the graph reads it, so every operator
// still sees the types the model declares. Weights read only inside If/Loop/Scan bodies (as outer-scope
// values) are converted too: the Cast sits in the graph that holds the initializer, before the node whose body
// reads it. A float32 tensor a linear layer reads as its weight but that is not converted is listed with the
// reason (a value beyond float16's range, another reader that is not a weight slot, a graph input).
import type { Graph, Model, Node, Tensor } from '../graph/ir.js';
import { DataType, subgraphsOf } from '../graph/ir.js';
import { FLOAT16_MAX, makeTensor, tensorByteSize, tensorToFloat64 } from '../graph/tensor.js';
import { touch } from '../graph/edit.js';

const WEIGHT_READERS = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);

export interface Float16Result {
  tensorsConverted: number;
  /** Tensors that would overflow float16 and stayed float32. */
  keptFloat32: string[];
  /** Other float32 weights that stayed float32, each with the reason. */
  skipped: Array<{ tensor: string; reason: string }>;
  /** Cast nodes added to read the half-precision weights back as float32, one per converted tensor (counted in nodesAfter). */
  castNodes: number;
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

interface Read { node: Node; slot: number }

/** Names a graph defines itself (inputs, initializers, node outputs): reads of these do not reach outer scopes. */
function ownNames(g: Graph): Set<string> {
  const own = new Set<string>();
  for (const v of g.inputs) own.add(v.name);
  for (const t of g.initializers) own.add(t.name);
  for (const n of g.nodes) for (const o of n.outputs) if (o) own.add(o);
  return own;
}

/** Every read of a name in `g` and, for names a body does not define, inside its subgraphs (any depth). */
function readsIn(g: Graph, into: Map<string, Read[]>, shadow: ReadonlySet<string> = new Set()): void {
  for (const n of g.nodes) {
    n.inputs.forEach((i, slot) => { if (i && !shadow.has(i)) into.set(i, [...(into.get(i) ?? []), { node: n, slot }]); });
    for (const sg of subgraphsOf(n)) {
      const inner = new Set([...shadow, ...ownNames(sg)]);
      readsIn(sg, into, inner);
    }
  }
}

const isWeightSlot = (r: Read) => WEIGHT_READERS.has(r.node.opType) && (r.node.domain === '' || r.node.domain === 'ai.onnx') && r.slot >= 1;
const nodeText = (n: Node) => `${n.opType} '${n.name || '(unnamed)'}'`;

function convertGraph(g: Graph, taken: Set<string>, r: Float16Result): void {
  const reads = new Map<string, Read[]>();
  readsIn(g, reads);
  const inputs = new Set(g.inputs.map((v) => v.name));
  const casts: Node[] = [];
  g.initializers = g.initializers.map((t): Tensor => {
    if (t.dataType !== DataType.FLOAT) return t;
    const rs = reads.get(t.name) ?? [];
    const weightReads = rs.filter(isWeightSlot);
    if (!weightReads.length) return t; // not a linear layer's weight: nothing to say
    if (inputs.has(t.name)) { r.skipped.push({ tensor: t.name, reason: 'also a graph input (callers may replace it at run time)' }); return t; }
    const other = rs.find((x) => !isWeightSlot(x));
    if (other) { r.skipped.push({ tensor: t.name, reason: `also read by ${nodeText(other.node)}, which is not a linear layer's weight slot` }); return t; }
    const values = tensorToFloat64(t);
    if (values.some((v) => Math.abs(v) > FLOAT16_MAX)) { r.keptFloat32.push(t.name); return t; }
    let name = `${t.name}.float16`;
    for (let k = 2; taken.has(name); k++) name = `${t.name}.float16.${k}`;
    taken.add(name);
    const half = makeTensor(name, t.dims, DataType.FLOAT16, values);
    r.tensorsConverted++;
    r.castNodes++;
    r.bytesBefore += tensorByteSize(t);
    r.bytesAfter += tensorByteSize(half);
    let castName = `${name}.cast`;
    for (let k = 2; taken.has(castName); k++) castName = `${name}.cast.${k}`;
    taken.add(castName);
    casts.push({
      name: castName, opType: 'Cast', domain: '', inputs: [name], outputs: [t.name], docString: '', extra: [],
      attributes: [{ name: 'to', value: { type: 'INT', i: DataType.FLOAT }, docString: '', refAttrName: '', extra: [] }],
    });
    return half;
  });
  if (casts.length) { g.nodes = [...casts, ...g.nodes]; touch(g); }
  for (const n of g.nodes) subgraphsOf(n).forEach((sg) => convertGraph(sg, taken, r));
}

/** Convert in place; returns what changed. */
export function storeFloat16(model: Model): Float16Result {
  const r: Float16Result = { tensorsConverted: 0, keptFloat32: [], skipped: [], castNodes: 0, bytesBefore: 0, bytesAfter: 0 };
  const taken = new Set<string>();
  allNames(model.graph, taken);
  convertGraph(model.graph, taken, r);
  return r;
}
