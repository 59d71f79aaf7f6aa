// Model builder on onnx-proto's own generated protobuf encoder, independent of pleat's writer: tests use it
// so the models they build are an outside check on pleat's reader, and the demo-model script uses it so the
// committed demo files are not produced by the code they exercise.
import onnxProto from 'onnx-proto';

const { onnx } = onnxProto;

export const T = {
  FLOAT: 1, UINT8: 2, INT8: 3, UINT16: 4, INT16: 5, INT32: 6, INT64: 7, STRING: 8, BOOL: 9,
  FLOAT16: 10, DOUBLE: 11, UINT32: 12, UINT64: 13, BFLOAT16: 16,
} as const;

/** Marks a number as a FLOAT attribute (plain integers become INT). */
export class F { constructor(readonly v: number) {} }
export class Fs { constructor(readonly v: number[]) {} }
export const f = (v: number) => new F(v);
export const fs = (v: number[]) => new Fs(v);

export type AttrIn = number | number[] | string | string[] | F | Fs | GraphBuilder | onnxProto.onnx.ITensorProto;
export type Dim = number | string | null;

/** Seeded random numbers (mulberry32), so tests are repeatable. */
export function rng(seed: number): () => number {
  let a = seed >>> 0;
  return () => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };
}

export function randn(r: () => number, n: number, scale = 1, offset = 0): Float32Array {
  const out = new Float32Array(n);
  for (let i = 0; i < n; i++) {
    const u = Math.max(r(), 1e-12), v = r();
    out[i] = offset + scale * Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  }
  return out;
}

export function uniform(r: () => number, n: number, lo: number, hi: number): Float32Array {
  const out = new Float32Array(n);
  for (let i = 0; i < n; i++) out[i] = lo + (hi - lo) * r();
  return out;
}

function half(v: number): number {
  const f32 = new Float32Array([v]);
  const x = new Uint32Array(f32.buffer)[0]!;
  const sign = (x >>> 16) & 0x8000;
  const exp = ((x >>> 23) & 0xff) - 112;
  const mant = x & 0x7fffff;
  if (exp >= 31) return sign | 0x7c00;
  if (exp <= 0) return sign | (exp < -10 ? 0 : Math.round(((mant | 0x800000) >> (1 - exp)) / 8192));
  return sign | ((exp << 10) + Math.round(mant / 8192));
}

export type TensorForm = 'raw' | 'typed';

/** Make a TensorProto. `form: 'typed'` uses float_data/int32_data/int64_data/double_data instead of raw_data. */
export function tensor(name: string, dims: number[], values: ArrayLike<number>, dataType: number = T.FLOAT, form: TensorForm = 'raw'): onnxProto.onnx.ITensorProto {
  const n = dims.reduce((a, b) => a * b, 1);
  if (values.length !== n) throw new Error(`tensor ${name}: ${values.length} values for dims ${dims}`);
  const t: onnxProto.onnx.ITensorProto = { name, dims, dataType };
  const arr = Array.from(values);
  if (form === 'typed') {
    if (dataType === T.FLOAT) t.floatData = arr;
    else if (dataType === T.DOUBLE) t.doubleData = arr;
    else if (dataType === T.INT64) t.int64Data = arr;
    else if (dataType === T.UINT64) t.uint64Data = arr;
    else if (dataType === T.FLOAT16) t.int32Data = arr.map(half);
    else if (dataType === T.BFLOAT16) t.int32Data = arr.map((v) => new Uint32Array(new Float32Array([v]).buffer)[0]! >>> 16);
    else t.int32Data = arr;
    return t;
  }
  let bytes: Uint8Array;
  const dv = (size: number) => { bytes = new Uint8Array(size * n); return new DataView(bytes.buffer); };
  switch (dataType) {
    case T.FLOAT: { const d = dv(4); arr.forEach((v, i) => d.setFloat32(i * 4, v, true)); break; }
    case T.DOUBLE: { const d = dv(8); arr.forEach((v, i) => d.setFloat64(i * 8, v, true)); break; }
    case T.FLOAT16: { const d = dv(2); arr.forEach((v, i) => d.setUint16(i * 2, half(v), true)); break; }
    case T.BFLOAT16: { const d = dv(2); arr.forEach((v, i) => d.setUint16(i * 2, new Uint32Array(new Float32Array([v]).buffer)[0]! >>> 16, true)); break; }
    case T.INT64: { const d = dv(8); arr.forEach((v, i) => d.setBigInt64(i * 8, BigInt(v), true)); break; }
    case T.INT32: { const d = dv(4); arr.forEach((v, i) => d.setInt32(i * 4, v, true)); break; }
    case T.INT8: { const d = dv(1); arr.forEach((v, i) => d.setInt8(i, v)); break; }
    case T.INT16: { const d = dv(2); arr.forEach((v, i) => d.setInt16(i * 2, v, true)); break; }
    case T.UINT16: { const d = dv(2); arr.forEach((v, i) => d.setUint16(i * 2, v, true)); break; }
    case T.UINT8: case T.BOOL: { const d = dv(1); arr.forEach((v, i) => d.setUint8(i, v)); break; }
    default: throw new Error(`builder: no raw encoding for type ${dataType}`);
  }
  t.rawData = bytes!;
  return t;
}

function valueInfo(name: string, elemType: number, shape?: Dim[]): onnxProto.onnx.IValueInfoProto {
  return {
    name,
    type: {
      tensorType: {
        elemType,
        shape: shape === undefined ? undefined : {
          dim: shape.map((d) => (typeof d === 'number' ? { dimValue: d } : typeof d === 'string' ? { dimParam: d } : {})),
        },
      },
    },
  };
}

function attribute(name: string, v: AttrIn): onnxProto.onnx.IAttributeProto {
  const A = onnx.AttributeProto.AttributeType;
  if (v instanceof F) return { name, type: A.FLOAT, f: v.v };
  if (v instanceof Fs) return { name, type: A.FLOATS, floats: v.v };
  if (v instanceof GraphBuilder) return { name, type: A.GRAPH, g: v.graph() };
  if (typeof v === 'number') {
    if (!Number.isInteger(v)) return { name, type: A.FLOAT, f: v };
    return { name, type: A.INT, i: v };
  }
  if (typeof v === 'string') return { name, type: A.STRING, s: new TextEncoder().encode(v) };
  if (Array.isArray(v)) {
    if (v.length > 0 && v.every((x) => typeof x === 'string')) return { name, type: A.STRINGS, strings: (v as string[]).map((x) => new TextEncoder().encode(x)) };
    const nums = v as number[];
    if (nums.every(Number.isInteger)) return { name, type: A.INTS, ints: nums };
    return { name, type: A.FLOATS, floats: nums };
  }
  return { name, type: A.TENSOR, t: v as onnxProto.onnx.ITensorProto };
}

export class GraphBuilder {
  nodes: onnxProto.onnx.INodeProto[] = [];
  inits: onnxProto.onnx.ITensorProto[] = [];
  ins: onnxProto.onnx.IValueInfoProto[] = [];
  outs: onnxProto.onnx.IValueInfoProto[] = [];
  infos: onnxProto.onnx.IValueInfoProto[] = [];
  private count = 0;
  constructor(public name = 'g') {}

  input(name: string, shape?: Dim[], elemType: number = T.FLOAT): this { this.ins.push(valueInfo(name, elemType, shape)); return this; }
  output(name: string, shape?: Dim[], elemType: number = T.FLOAT): this { this.outs.push(valueInfo(name, elemType, shape)); return this; }
  info(name: string, shape?: Dim[], elemType: number = T.FLOAT): this { this.infos.push(valueInfo(name, elemType, shape)); return this; }

  /** Add an initializer; returns its name. */
  init(name: string, dims: number[], values: ArrayLike<number>, dataType: number = T.FLOAT, form: TensorForm = 'raw'): string {
    this.inits.push(tensor(name, dims, values, dataType, form));
    return name;
  }

  /** Add a node; returns its first output name. Outputs default to `<name>_out`. */
  node(opType: string, inputs: string[], attrs: Record<string, AttrIn> = {}, opts: { name?: string; outputs?: string[]; domain?: string } = {}): string {
    const name = opts.name ?? `${opType.toLowerCase()}_${this.count++}`;
    const outputs = opts.outputs ?? [`${name}_out`];
    this.nodes.push({
      name, opType, input: inputs, output: outputs, domain: opts.domain,
      attribute: Object.entries(attrs).map(([k, v]) => attribute(k, v)),
    });
    return outputs[0]!;
  }

  /** A Constant node holding a tensor; returns its output name. */
  constant(name: string, dims: number[], values: ArrayLike<number>, dataType: number = T.FLOAT, form: TensorForm = 'raw'): string {
    return this.node('Constant', [], { value: tensor(name, dims, values, dataType, form) }, { name: `${name}_const`, outputs: [name] });
  }

  graph(): onnxProto.onnx.IGraphProto {
    return { name: this.name, node: this.nodes, initializer: this.inits, input: this.ins, output: this.outs, valueInfo: this.infos };
  }
}

export interface ModelOptions {
  opset?: number; irVersion?: number; producer?: string; producerVersion?: string; extraOpsets?: Array<[string, number]>;
  docString?: string; metadata?: Array<[string, string]>;
}

export function modelBytes(g: GraphBuilder, o: ModelOptions = {}): Uint8Array {
  const model: onnxProto.onnx.IModelProto = {
    irVersion: o.irVersion ?? 8,
    producerName: o.producer ?? 'pleat-tests',
    producerVersion: o.producerVersion ?? '1',
    opsetImport: [{ domain: '', version: o.opset ?? 17 }, ...(o.extraOpsets ?? []).map(([domain, version]) => ({ domain, version }))],
    graph: g.graph(),
  };
  if (o.docString) model.docString = o.docString;
  if (o.metadata?.length) model.metadataProps = o.metadata.map(([key, value]) => ({ key, value }));
  return onnx.ModelProto.encode(model).finish();
}
