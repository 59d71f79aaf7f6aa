// Seeded mutations of ONNX models for the fuzz test: byte-level damage (flips, truncation, splices) and
// structural edits made on onnx-proto's decoded message (independent of pleat's reader and writer): dims,
// attributes, op types, names, data types, raw data, external-data entries, opsets, subgraphs. Same seed,
// same mutant.
import onnxProto from 'onnx-proto';
import { rng } from '../helpers/build.js';

const { onnx } = onnxProto;
type M = onnxProto.onnx.IModelProto;
type G = onnxProto.onnx.IGraphProto;
type Rand = () => number;

const pick = <T>(r: Rand, xs: readonly T[]): T => xs[Math.floor(r() * xs.length)]!;
const int = (r: Rand, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));

/** Numbers that break assumptions: zero, negatives, off-by-one, huge, beyond 2^31 and 2^53. */
const NASTY = [0, 1, -1, 2, 3, -7, 7, 65, 255, 65536, 2 ** 31 - 1, 2 ** 31, 2 ** 40, -(2 ** 40), 2 ** 62];
const NASTY_FLOATS = [0, -0, 1e-45, -1, 1e38, 3.4e38, Infinity, -Infinity, NaN, 65504, 70000, 1e-12];
const OPS = ['Conv', 'ConvTranspose', 'Gemm', 'MatMul', 'BatchNormalization', 'Add', 'Mul', 'Relu', 'Identity', 'Reshape',
  'LayerNormalization', 'InstanceNormalization', 'If', 'Loop', 'Cast', 'Flatten', 'Concat', 'NoSuchOp', 'Transpose', 'Pad'];
const TYPES = [0, 1, 2, 3, 6, 7, 9, 10, 11, 16, 8, 99];

/** Every graph of a model (main first, then subgraphs depth-first). */
function graphsOf(g: G | null | undefined, out: G[] = []): G[] {
  if (!g) return out;
  out.push(g);
  for (const n of g.node ?? []) for (const a of n.attribute ?? []) {
    if (a.g) graphsOf(a.g, out);
    for (const sg of a.graphs ?? []) graphsOf(sg, out);
  }
  return out;
}

type StructMutation = (r: Rand, m: M) => void;

const anyGraph = (r: Rand, m: M) => pick(r, graphsOf(m.graph));
const anyNode = (r: Rand, m: M) => { const g = anyGraph(r, m); return g.node?.length ? pick(r, g.node) : undefined; };
const anyTensor = (r: Rand, m: M) => {
  const ts = graphsOf(m.graph).flatMap((g) => [...(g.initializer ?? []), ...(g.node ?? []).flatMap((n) => (n.attribute ?? []).filter((a) => a.t).map((a) => a.t!))]);
  return ts.length ? pick(r, ts) : undefined;
};
const anyValueInfo = (r: Rand, m: M) => {
  const g = anyGraph(r, m);
  const vs = [...(g.input ?? []), ...(g.output ?? []), ...(g.valueInfo ?? [])];
  return vs.length ? pick(r, vs) : undefined;
};

const STRUCT: Array<[string, StructMutation]> = [
  ['value-info dim', (r, m) => {
    const v = anyValueInfo(r, m);
    const dims = v?.type?.tensorType?.shape?.dim;
    if (!dims?.length) return;
    const d = pick(r, dims);
    if (r() < 0.3) { d.dimValue = undefined; d.dimParam = pick(r, ['batch', 'n', '', 'x y']); } else { d.dimParam = undefined; d.dimValue = pick(r, NASTY); }
  }],
  ['value-info rank', (r, m) => {
    const dims = anyValueInfo(r, m)?.type?.tensorType?.shape?.dim;
    if (!dims) return;
    if (r() < 0.5 && dims.length) dims.splice(int(r, 0, dims.length - 1), 1); else dims.push({ dimValue: pick(r, [1, 2, 3]) });
  }],
  ['value-info type', (r, m) => { const v = anyValueInfo(r, m); if (v?.type?.tensorType) v.type.tensorType.elemType = pick(r, TYPES); }],
  ['tensor dims', (r, m) => {
    const t = anyTensor(r, m);
    if (!t) return;
    const dims = (t.dims ?? []).map(Number);
    const k = r();
    if (k < 0.4 && dims.length) dims[int(r, 0, dims.length - 1)] = pick(r, NASTY);
    else if (k < 0.7) dims.reverse();
    else if (dims.length) dims.pop(); else dims.push(2);
    t.dims = dims;
  }],
  ['tensor type', (r, m) => { const t = anyTensor(r, m); if (t) t.dataType = pick(r, TYPES); }],
  ['tensor raw data', (r, m) => {
    const t = anyTensor(r, m);
    if (!t?.rawData?.length) return;
    const raw = Uint8Array.from(t.rawData);
    const k = r();
    if (k < 0.3) t.rawData = raw.subarray(0, int(r, 0, raw.length - 1));
    else if (k < 0.6) { const f = new Float32Array(raw.buffer, 0, raw.length >> 2); if (f.length) f[int(r, 0, f.length - 1)] = pick(r, NASTY_FLOATS); t.rawData = raw; }
    else if (k < 0.8) { t.rawData = raw; t.floatData = [1, 2, 3]; } // both raw_data and a typed field
    else t.rawData = new Uint8Array([...raw, ...raw]);
  }],
  ['tensor typed data', (r, m) => {
    const t = anyTensor(r, m);
    if (!t) return;
    const n = int(r, 0, 6);
    const vals = Array.from({ length: n }, () => pick(r, NASTY_FLOATS));
    t.rawData = r() < 0.5 ? new Uint8Array(0) : t.rawData;
    if (r() < 0.5) t.floatData = vals; else t.int64Data = vals.map((v) => (Number.isFinite(v) ? Math.trunc(v) : 0));
  }],
  ['external data', (r, m) => {
    const t = anyTensor(r, m);
    if (!t) return;
    t.dataLocation = 1;
    const entries = [...(t.externalData ?? [])].map((e) => ({ key: e.key, value: e.value }));
    const key = pick(r, ['location', 'offset', 'length', 'checksum', 'location']);
    const value = key === 'location'
      ? pick(r, ['../outside.bin', '/etc/passwd', '', 'nosuch.bin', '.', 'a/../x.onnx.data', 'x.onnx.data', './x.onnx.data', 'sub'])
      : pick(r, ['0', '-1', '4', '99999999999', 'abc', '1e3', String(pick(r, NASTY))]);
    const at = entries.findIndex((e) => e.key === key);
    if (at >= 0 && r() < 0.8) entries[at]!.value = value; else entries.push({ key, value });
    t.externalData = entries;
    if (r() < 0.5) t.rawData = new Uint8Array(0);
  }],
  ['attribute int', (r, m) => {
    const n = anyNode(r, m);
    const a = n?.attribute?.length ? pick(r, n.attribute) : undefined;
    if (!a) return;
    if (a.ints?.length) a.ints = a.ints.map((v) => (r() < 0.5 ? pick(r, NASTY) : v));
    else if (a.f !== undefined && a.f !== null && a.type === 1) a.f = pick(r, NASTY_FLOATS);
    else a.i = pick(r, NASTY);
  }],
  ['attribute added', (r, m) => {
    const n = anyNode(r, m);
    if (!n) return;
    const name = pick(r, ['group', 'pads', 'strides', 'dilations', 'axis', 'epsilon', 'transA', 'transB', 'training_mode', 'spatial', 'kernel_shape', 'auto_pad', 'to', 'perm']);
    const v = name === 'epsilon' ? { name, type: 1, f: pick(r, NASTY_FLOATS) }
      : name === 'auto_pad' ? { name, type: 3, s: new TextEncoder().encode(pick(r, ['SAME_UPPER', 'VALID', 'NOTSET', 'BOGUS'])) }
        : ['pads', 'strides', 'dilations', 'kernel_shape', 'perm'].includes(name) ? { name, type: 7, ints: Array.from({ length: int(r, 0, 5) }, () => pick(r, NASTY)) }
          : { name, type: 2, i: pick(r, NASTY) };
    n.attribute = [...(n.attribute ?? []).filter((a) => a.name !== name), v];
  }],
  ['op type', (r, m) => { const n = anyNode(r, m); if (n) n.opType = pick(r, OPS); }],
  ['node domain', (r, m) => { const n = anyNode(r, m); if (n) n.domain = pick(r, ['', 'ai.onnx', 'com.example', 'ai.onnx.ml']); }],
  ['node input', (r, m) => {
    const n = anyNode(r, m);
    if (!n) return;
    const ins = [...(n.input ?? [])];
    const k = r();
    const names = graphsOf(m.graph).flatMap((g) => [...(g.initializer ?? []).map((t) => t.name!), ...(g.node ?? []).flatMap((x) => x.output ?? [])]);
    if (k < 0.3 && ins.length) ins.splice(int(r, 0, ins.length - 1), 1);
    else if (k < 0.6) ins.push(names.length ? pick(r, names) : 'ghost');
    else if (ins.length) ins[int(r, 0, ins.length - 1)] = pick(r, [...names.slice(0, 20), '', 'ghost']);
    n.input = ins;
  }],
  ['node output', (r, m) => {
    const n = anyNode(r, m);
    if (!n) return;
    const g = anyGraph(r, m);
    const outs = [...(n.output ?? [])];
    const other = g.node?.length ? pick(r, g.node).output?.[0] : undefined;
    if (r() < 0.5) outs.push(other ?? 'extra'); else if (outs.length) outs[0] = other ?? '';
    n.output = outs;
  }],
  ['node order', (r, m) => { const g = anyGraph(r, m); if (g.node && g.node.length > 1) { const i = int(r, 0, g.node.length - 1); const [x] = g.node.splice(i, 1); g.node.splice(int(r, 0, g.node.length), 0, x!); } }],
  ['node removed', (r, m) => { const g = anyGraph(r, m); if (g.node?.length) g.node.splice(int(r, 0, g.node.length - 1), 1); }],
  ['node duplicated', (r, m) => { const g = anyGraph(r, m); if (g.node?.length) g.node.push(onnx.NodeProto.fromObject(onnx.NodeProto.toObject(pick(r, g.node) as onnxProto.onnx.NodeProto))); }],
  ['initializer duplicated', (r, m) => { const g = anyGraph(r, m); if (g.initializer?.length) g.initializer.push(onnx.TensorProto.fromObject(onnx.TensorProto.toObject(pick(r, g.initializer) as onnxProto.onnx.TensorProto))); }],
  ['initializer removed', (r, m) => { const g = anyGraph(r, m); if (g.initializer?.length) g.initializer.splice(int(r, 0, g.initializer.length - 1), 1); }],
  ['initializer as input', (r, m) => { const g = anyGraph(r, m); if (g.initializer?.length) { const t = pick(r, g.initializer); g.input = [...(g.input ?? []), { name: t.name, type: { tensorType: { elemType: t.dataType, shape: { dim: (t.dims ?? []).map((d) => ({ dimValue: d })) } } } }]; } }],
  ['graph output', (r, m) => { const g = m.graph!; if (g.output?.length) { if (r() < 0.5) g.output[0]!.name = pick(r, ['ghost', g.node?.[0]?.output?.[0] ?? 'x']); else g.output.splice(0, 1); } }],
  ['graph input removed', (r, m) => { const g = anyGraph(r, m); if (g.input?.length) g.input.splice(int(r, 0, g.input.length - 1), 1); }],
  ['opset', (r, m) => { if (m.opsetImport?.length) m.opsetImport[0]!.version = pick(r, [0, -1, 1, 6, 7, 9, 11, 13, 17, 18, 99, 2 ** 40]); }],
  ['ir version', (r, m) => { m.irVersion = pick(r, [0, 1, 3, 4, 7, 8, 9, 10, 99, -1]); }],
  ['subgraph swapped', (r, m) => {
    const gs = graphsOf(m.graph);
    const withSub = gs.flatMap((g) => (g.node ?? []).flatMap((n) => (n.attribute ?? []).filter((a) => a.g)));
    if (withSub.length) { const a = pick(r, withSub); a.g = r() < 0.5 ? { name: 'empty' } : onnx.GraphProto.decode(onnx.GraphProto.encode(m.graph!).finish()); }
  }],
  ['names clash', (r, m) => {
    const g = anyGraph(r, m);
    const names = (g.node ?? []).flatMap((n) => n.output ?? []);
    const n = g.node?.length ? pick(r, g.node) : undefined;
    if (n && names.length) n.output = [pick(r, names)];
  }],
];

/** One model's mutant: 1 to 3 mutations, structural or byte-level, chosen by `seed`. */
export function mutate(bytes: Uint8Array, seed: number): { bytes: Uint8Array; what: string[] } {
  const r = rng(seed);
  const what: string[] = [];
  if (r() < 0.2) return byteMutant(r, bytes, what);
  const m = onnx.ModelProto.decode(bytes);
  const count = int(r, 1, 3);
  for (let i = 0; i < count; i++) {
    const [name, f] = pick(r, STRUCT);
    what.push(name);
    f(r, m);
  }
  let out: Uint8Array = onnx.ModelProto.encode(m).finish();
  if (r() < 0.1) out = byteMutant(r, out, what).bytes;
  return { bytes: out, what };
}

function byteMutant(r: Rand, bytes: Uint8Array, what: string[]): { bytes: Uint8Array; what: string[] } {
  const b = Uint8Array.from(bytes);
  const k = r();
  if (k < 0.4) {
    const n = int(r, 1, 8);
    for (let i = 0; i < n; i++) b[int(r, 0, b.length - 1)] = int(r, 0, 255);
    what.push(`bytes: ${n} flipped`);
    return { bytes: b, what };
  }
  if (k < 0.6) { what.push('bytes: truncated'); return { bytes: b.subarray(0, int(r, 0, b.length - 1)), what }; }
  if (k < 0.8) {
    const at = int(r, 0, b.length - 1), len = int(r, 1, 64);
    what.push('bytes: range repeated');
    return { bytes: new Uint8Array([...b.subarray(0, at + len), ...b.subarray(at, at + len), ...b.subarray(at + len)]), what };
  }
  // a varint made huge: 0xff runs read as lengths far past the end
  const at = int(r, 0, b.length - 6);
  for (let i = 0; i < 5; i++) b[at + i] = 0xff;
  what.push('bytes: varint run');
  return { bytes: b, what };
}
