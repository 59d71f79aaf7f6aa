// The in-memory form of an ONNX model that every other module works on.
//
// Lossless by construction: every message read from a file keeps `origin`, where its exact bytes are,
// plus `extra`, the fields pleat does not model (including fields newer than the bundled schema). The
// writer re-emits `origin` for any message whose fields still match what its bytes decode to, so a model
// with no change comes out byte-identical, and a changed one keeps every untouched message byte for byte.
// Code that changes tensor data in place must call `touch(tensor)` (see src/graph/edit.ts).
import { PleatError } from '../errors.js';

/** A protobuf field kept as its original bytes (tag included). */
export interface RawField {
  field: number;
  bytes: Uint8Array;
}

/**
 * Where a message came from: buf[start, end), offsets into the buffer the file was read into (shared by every
 * message of the model). Nothing else is kept at read time: the writer decodes these bytes again to decide
 * whether the message changed and to recover its field order (src/onnx/signature.ts).
 */
export interface Origin {
  buf: Uint8Array;
  start: number;
  end: number;
  /** For a tensor with external data: the bytes the reader loaded (an unchanged tensor still holds them). */
  loaded?: Uint8Array;
}

/** ONNX TensorProto.DataType codes. */
export const DataType = {
  UNDEFINED: 0,
  FLOAT: 1,
  UINT8: 2,
  INT8: 3,
  UINT16: 4,
  INT16: 5,
  INT32: 6,
  INT64: 7,
  STRING: 8,
  BOOL: 9,
  FLOAT16: 10,
  DOUBLE: 11,
  UINT32: 12,
  UINT64: 13,
  COMPLEX64: 14,
  COMPLEX128: 15,
  BFLOAT16: 16,
} as const;
export type DataTypeCode = number;

/**
 * How a tensor's elements are stored. Exactly mirrors the TensorProto field that held them, so an untouched
 * tensor re-encodes to the same bytes and a changed one is written back in its own form.
 */
export type TensorStorage =
  | { kind: 'raw'; bytes: Uint8Array } // raw_data, little-endian
  | { kind: 'float_data'; values: Float32Array }
  | { kind: 'int32_data'; values: Int32Array } // int32/int16/int8/uint16/uint8/bool, and float16/bfloat16 bits
  | { kind: 'int64_data'; values: BigInt64Array }
  | { kind: 'uint64_data'; values: BigUint64Array }
  | { kind: 'double_data'; values: Float64Array }
  | { kind: 'string_data'; values: Uint8Array[] }
  | { kind: 'external'; entries: Array<[string, string]>; bytes: Uint8Array } // bytes loaded from the side file
  | { kind: 'empty' };

export interface Tensor {
  name: string;
  dims: number[];
  dataType: DataTypeCode;
  storage: TensorStorage;
  docString: string;
  extra: RawField[];
  origin?: Origin;
  /**
   * Set by the reader on an initializer that is also listed as a graph input: a default value a caller may
   * replace at run time (IR version 4 and later; before that every initializer had to be listed as an input).
   */
  overridable?: boolean;
}

const CHUNK_BITS = 14;
const CHUNK = 1 << CHUNK_BITS;
const FIRST_CHUNK = 4;

/**
 * Where the messages of one read are in the file buffer: for each tensor and node its own [start, end), and for a
 * tensor holding raw_data that field's [start, end). One off-heap list for a whole read rather than six fields
 * (buffer, four offsets, origin) on each of some 2.7 x 10^5 objects of a 10^5-node graph: the garbage collector
 * copies every field of every object made while the rest of the file is read, and this machine pays for each page
 * of memory first touched (measured on survey of that graph: 11 MB less resident, 8% fewer page faults).
 */
export class FileSpans {
  /**
   * Four offsets per message, in lists of CHUNK messages: a list grown by doubling and copying cost more than the
   * collection it saved (each large new list is also external memory the collector counts).
   */
  private readonly chunks: Uint32Array[] = [];
  private count = 0;
  /** Origins given or cleared (null) after the read, by message; most reads never set one. */
  private changed: Map<number, Origin | null> | undefined;

  constructor(readonly buf: Uint8Array) {
    // offsets are kept in 32 bits: a buffer may hold 2^32 bytes, whose end would not fit (and no protobuf file is
    // that large: a message holds at most 2 GiB, so ONNX keeps larger weights in external data)
    if (buf.byteLength > 0xffffffff) {
      throw new PleatError('bad-model', `the file holds ${buf.byteLength} bytes: a protobuf message holds at most 2 GiB; keep the weights in external data`);
    }
  }

  /** Record a message; its index. */
  add(start: number, end: number, a: number, b: number): number {
    const i = this.count++;
    const k = i & (CHUNK - 1);
    if (k === 0) this.chunks.push(new Uint32Array(4 * (i === 0 ? FIRST_CHUNK : CHUNK)));
    let c = this.chunks[i >>> CHUNK_BITS]!;
    if (4 * k >= c.length) { // the first list, for the few messages of a one-off decode, is small
      const grown = new Uint32Array(4 * CHUNK);
      grown.set(c);
      this.chunks[0] = c = grown;
    }
    c[4 * k] = start; c[4 * k + 1] = end; c[4 * k + 2] = a; c[4 * k + 3] = b;
    return i;
  }

  /** Offset k of message i: 0 its start, 1 its end, 2 and 3 its raw_data's (0 for a node). */
  offset(i: number, k: number): number {
    return this.chunks[i >>> CHUNK_BITS]![4 * (i & (CHUNK - 1)) + k]!;
  }

  /**
   * Message i's origin: a new object each time unless one was given after the read (the writer reads the three
   * fields; nothing keys on the object).
   */
  origin(i: number): Origin | undefined {
    if (this.changed !== undefined) {
      const o = this.changed.get(i);
      if (o !== undefined) return o ?? undefined;
    }
    return { buf: this.buf, start: this.offset(i, 0), end: this.offset(i, 1) };
  }

  setOrigin(i: number, o: Origin | undefined): void {
    (this.changed ??= new Map()).set(i, o ?? null);
  }
}

/**
 * What FileTensor and FileNode share: where the message's bytes are is an index into the read's FileSpans, and its
 * `origin` is made when something asks for it (the writer does). Code that clears `origin` assigns undefined
 * (touch() does): `delete` would not reach a property of the class.
 */
abstract class FileMessage {
  // (private, so a read tensor or node has only its IR fields as own, enumerable fields)
  #spans: FileSpans;
  #at: number;

  constructor(spans: FileSpans, at: number) {
    this.#spans = spans;
    this.#at = at;
  }

  get origin(): Origin | undefined {
    return this.#spans.origin(this.#at);
  }

  set origin(o: Origin | undefined) {
    this.#spans.setOrigin(this.#at, o);
  }

  /** Offset k of this message in its spans (see FileSpans.offset). */
  protected offset(k: number): number {
    return this.#spans.offset(this.#at, k);
  }

  /** A view of the file's [start, end). */
  protected fileBytes(start: number, end: number): Uint8Array {
    return this.#spans.buf.subarray(start, end);
  }
}

/**
 * A tensor as the reader makes it. A 10^5-node graph holds some 10^5 small tensors, nearly all raw_data, and
 * most commands never look at their bytes: so raw_data stays two offsets into the file buffer (in FileSpans), and
 * the view (`storage.bytes`) is made the first time something asks for `storage`, then kept (caches key on it).
 * Own fields are the Tensor fields but `storage` and `origin`, which are properties of the class: code that copies
 * a tensor names them (no spread of a tensor). storageKind, rawByteLength and rawBytesOf answer without keeping a view.
 */
export class FileTensor extends FileMessage implements Tensor {
  declare overridable?: boolean;
  name: string;
  dims: number[];
  dataType: DataTypeCode;
  docString: string;
  extra: RawField[];
  /** undefined: raw_data at the spans' own pair. */
  #storage: TensorStorage | undefined;

  /** `storage` undefined: raw_data at the buffer's [a, b) of message `at` in `spans`. */
  constructor(name: string, dims: number[], dataType: DataTypeCode, storage: TensorStorage | undefined, spans: FileSpans,
    at: number, docString: string, extra: RawField[]) {
    super(spans, at);
    this.name = name;
    this.dims = dims;
    this.dataType = dataType;
    this.docString = docString;
    this.extra = extra;
    this.#storage = storage;
  }

  get storage(): TensorStorage {
    return this.#storage ??= { kind: 'raw', bytes: this.rawFileBytes() };
  }

  set storage(s: TensorStorage) {
    this.#storage = s;
  }

  private rawFileBytes(): Uint8Array {
    return this.fileBytes(this.offset(2), this.offset(3));
  }

  /**
   * A view of raw or external bytes (undefined for other kinds). While `storage` was never asked for, a new view
   * each time that the tensor does not keep: an analysis reading every weight once leaves no view per tensor.
   */
  rawView(): Uint8Array | undefined {
    const s = this.#storage;
    if (s === undefined) return this.rawFileBytes();
    return s.kind === 'raw' || s.kind === 'external' ? s.bytes : undefined;
  }

  /** The storage kind, without making a view of raw bytes. */
  get storageKind(): TensorStorage['kind'] {
    return this.#storage === undefined ? 'raw' : this.#storage.kind;
  }

  /** Bytes of raw or external storage (-1 for other kinds), without making a view. */
  get rawByteLength(): number {
    const s = this.#storage;
    if (s === undefined) return this.offset(3) - this.offset(2);
    return s.kind === 'raw' || s.kind === 'external' ? s.bytes.byteLength : -1;
  }
}

/**
 * A node as the reader makes it: the Node fields as own fields, and `origin` a property of the class (FileMessage):
 * a graph of 10^5 nodes otherwise held 10^5 origin objects for the garbage collector to copy. Code that copies a
 * node names `origin` if it means to keep it (a spread does not carry it).
 */
export class FileNode extends FileMessage implements Node {
  name: string;
  opType: string;
  domain: string;
  inputs: string[];
  outputs: string[];
  attributes: Attribute[];
  docString: string;
  extra: RawField[];

  constructor(name: string, opType: string, domain: string, inputs: string[], outputs: string[], attributes: Attribute[],
    docString: string, extra: RawField[], spans: FileSpans, at: number) {
    super(spans, at);
    this.name = name;
    this.opType = opType;
    this.domain = domain;
    this.inputs = inputs;
    this.outputs = outputs;
    this.attributes = attributes;
    this.docString = docString;
    this.extra = extra;
  }
}

/** A tensor's storage kind (a tensor read from a file answers without making a view of its bytes). */
export function storageKind(t: Tensor): TensorStorage['kind'] {
  return t instanceof FileTensor ? t.storageKind : t.storage.kind;
}

/** A tensor's external storage, or undefined when it is held otherwise (without making a view of raw bytes). */
export function externalStorage(t: Tensor): Extract<TensorStorage, { kind: 'external' }> | undefined {
  if (storageKind(t) !== 'external') return undefined;
  const s = t.storage;
  return s.kind === 'external' ? s : undefined;
}

/**
 * A view of a tensor's raw or external bytes, undefined for other kinds (the same memory as `storage.bytes`; a
 * tensor read from a file does not keep it, see FileTensor.rawView).
 */
export function rawBytesOf(t: Tensor): Uint8Array | undefined {
  if (t instanceof FileTensor) return t.rawView();
  const s = t.storage;
  return s.kind === 'raw' || s.kind === 'external' ? s.bytes : undefined;
}

/** Bytes of a tensor's raw or external storage, -1 for other kinds (read tensors answer without a view). */
export function rawByteLength(t: Tensor): number {
  if (t instanceof FileTensor) return t.rawByteLength;
  const s = t.storage;
  return s.kind === 'raw' || s.kind === 'external' ? s.bytes.byteLength : -1;
}

export type AttributeValue =
  | { type: 'FLOAT'; f: number }
  | { type: 'INT'; i: number }
  | { type: 'STRING'; s: Uint8Array }
  | { type: 'TENSOR'; t: Tensor }
  | { type: 'GRAPH'; g: Graph }
  | { type: 'FLOATS'; floats: number[] }
  | { type: 'INTS'; ints: number[] }
  | { type: 'STRINGS'; strings: Uint8Array[] }
  | { type: 'TENSORS'; tensors: Tensor[] }
  | { type: 'GRAPHS'; graphs: Graph[] }
  | { type: 'OTHER'; code: number }; // sparse tensors, type protos, unknown: kept in `extra`

export interface Attribute {
  name: string;
  value: AttributeValue;
  docString: string;
  refAttrName: string;
  extra: RawField[];
  origin?: Origin;
}

export interface Node {
  name: string;
  opType: string;
  domain: string; // '' means the default ONNX domain ('ai.onnx')
  inputs: string[]; // '' marks an omitted optional input
  outputs: string[];
  attributes: Attribute[];
  docString: string;
  extra: RawField[];
  origin?: Origin;
}

/** A dimension: a number, a symbolic name, or unknown. */
export type Dim = number | string | null;

export interface ValueInfo {
  name: string;
  /** Element type when the value is a tensor, else undefined (sequences, maps, optionals). */
  elemType?: DataTypeCode;
  /** Shape when known; undefined means rank unknown. */
  shape?: Dim[];
  docString: string;
  /** The TypeProto exactly as read (re-emitted when elemType/shape are unchanged). */
  typeBytes?: Uint8Array;
  extra: RawField[];
  origin?: Origin;
}

export interface Graph {
  name: string;
  nodes: Node[];
  /** Initializers in file order. */
  initializers: Tensor[];
  inputs: ValueInfo[];
  outputs: ValueInfo[];
  valueInfo: ValueInfo[];
  docString: string;
  extra: RawField[];
  origin?: Origin;
}

export interface OpsetImport {
  domain: string;
  version: number;
  extra: RawField[];
  origin?: Origin;
}

export interface Model {
  irVersion: number;
  opsets: OpsetImport[];
  producerName: string;
  producerVersion: string;
  domain: string;
  modelVersion: number;
  docString: string;
  graph: Graph;
  metadata: Array<[string, string]>;
  /** Unmodelled top-level fields (functions, training_info, newer fields). */
  extra: RawField[];
  origin?: Origin;
  /** Folder the model was read from: external data locations are relative to it. */
  baseDir: string;
  /** The file the model was read from, if any (never overwritten by the writer). */
  sourcePath?: string;
}

/** Look up the opset version a model imports for a domain ('' and 'ai.onnx' are the same domain). */
export function opsetVersion(model: Pick<Model, 'opsets'>, domain = ''): number | undefined {
  const want = domain === 'ai.onnx' ? '' : domain;
  for (const o of model.opsets) {
    const d = o.domain === 'ai.onnx' ? '' : o.domain;
    if (d === want) return o.version;
  }
  return undefined;
}

export function attr(node: Node, name: string): AttributeValue | undefined {
  const attrs = node.attributes; // a loop, and indexed: called per node in analyses
  for (let i = 0; i < attrs.length; i++) if (attrs[i]!.name === name) return attrs[i]!.value;
  return undefined;
}

export function attrInt(node: Node, name: string, dflt: number): number;
export function attrInt(node: Node, name: string): number | undefined;
export function attrInt(node: Node, name: string, dflt?: number): number | undefined {
  const v = attr(node, name);
  return v && v.type === 'INT' ? v.i : dflt;
}

export function attrFloat(node: Node, name: string, dflt: number): number;
export function attrFloat(node: Node, name: string): number | undefined;
export function attrFloat(node: Node, name: string, dflt?: number): number | undefined {
  const v = attr(node, name);
  return v && v.type === 'FLOAT' ? v.f : dflt;
}

export function attrInts(node: Node, name: string): number[] | undefined {
  const v = attr(node, name);
  return v && v.type === 'INTS' ? v.ints : undefined;
}

export function attrFloats(node: Node, name: string): number[] | undefined {
  const v = attr(node, name);
  return v && v.type === 'FLOATS' ? v.floats : undefined;
}

export function attrString(node: Node, name: string, dflt: string): string;
export function attrString(node: Node, name: string): string | undefined;
export function attrString(node: Node, name: string, dflt?: string): string | undefined {
  const v = attr(node, name);
  return v && v.type === 'STRING' ? attrText.decode(v.s) : dflt;
}
const attrText = new TextDecoder();

export function attrGraph(node: Node, name: string): Graph | undefined {
  const v = attr(node, name);
  return v && v.type === 'GRAPH' ? v.g : undefined;
}

export function attrTensor(node: Node, name: string): Tensor | undefined {
  const v = attr(node, name);
  return v && v.type === 'TENSOR' ? v.t : undefined;
}

/** Every subgraph a node carries (If branches, Loop/Scan bodies, any GRAPH/GRAPHS attribute). */
/** Whether a node carries subgraphs (without building a list for the many nodes that carry none). */
// (indexed loops in these helpers: they run per node or per tensor over graphs of 10^5 nodes, often from code not yet
// optimized, where each step of a for-of makes an iterator result object; dims lists may be frozen and shared)
export function hasSubgraphs(node: Node): boolean {
  const attrs = node.attributes;
  for (let i = 0; i < attrs.length; i++) {
    const t = attrs[i]!.value.type;
    if (t === 'GRAPH' || t === 'GRAPHS') return true;
  }
  return false;
}

export function subgraphsOf(node: Node): Graph[] {
  const out: Graph[] = [];
  const attrs = node.attributes;
  for (let i = 0; i < attrs.length; i++) {
    const v = attrs[i]!.value;
    if (v.type === 'GRAPH') out.push(v.g);
    else if (v.type === 'GRAPHS') out.push(...v.graphs);
  }
  return out;
}

export function elementCount(dims: readonly number[]): number {
  let n = 1;
  for (let i = 0; i < dims.length; i++) n *= dims[i]!;
  return n;
}
