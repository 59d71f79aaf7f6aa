// IR -> bytes. A message whose modelled fields match what was read is re-emitted from its original bytes;
// a changed one is re-encoded field by field in its original field order, with the fields pleat does not
// model copied through untouched. Output files are written to temporary names and renamed into place.
import { closeSync, copyFileSync, existsSync, openSync, readSync, renameSync, rmSync, writeSync } from 'node:fs';
import { basename, dirname, join, posix, resolve } from 'node:path';
import type { Attribute, Graph, Model, Node, OpsetImport, Origin, RawField, Tensor, ValueInfo, Dim } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import {
  Emitter, WT_LEN, emitBytes, emitFloat, emitInt, emitMessage, emitString,
} from './wire.js';
import {
  attributeUnchanged, graphUnchanged, modelUnchanged, nodeUnchanged, opsetUnchanged, tensorUnchanged, typeUnchanged,
  valueInfoUnchanged, fieldOrder, type Kid,
} from './signature.js';
import { externalRef, sideFilePaths } from './external.js';
import { entryAt, sameFile, specialKind } from './paths.js';
import { IntentLog } from './intent.js';
import { randomBytes } from 'node:crypto';
import { deferredIn, ensureLoaded, lazySourceOf, pendingIn, reopenSource, type BlockBuffer } from './sparse-read.js';

interface Piece { chunks: Uint8Array[]; length: number; same: boolean }

export interface WriteOptions {
  /** Tensors whose data has at least this many bytes go to a side file; smaller ones are stored inline. */
  externalThreshold?: number;
}

/** A side file to write: named pieces at offsets. */
interface SideFile { location: string; pieces: Array<{ offset: number; bytes: Uint8Array }>; end: number }

/**
 * Where external data goes: one side file named after the output (`OUT.data`), never the input's side-file name.
 * Two outputs in one folder then never share a side file, two spellings of one input location (ext.bin and
 * ./ext.bin) become two separate ranges, and a side file can never be named like the output itself.
 */
class ExternalPlan {
  files = new Map<string, SideFile>();
  readonly location: string;
  constructor(outName: string, private opts: WriteOptions) {
    this.location = sideFileName(outName);
  }

  /** Where a tensor's data goes: undefined = inline; else the entries to write. */
  place(t: Tensor): Array<[string, string]> | undefined {
    const size = t.storage.kind === 'raw' || t.storage.kind === 'external' ? t.storage.bytes.byteLength : -1;
    const threshold = this.opts.externalThreshold;
    if (threshold !== undefined) {
      if (size < threshold || size < 0) return undefined;
      return this.append(t, 64);
    }
    if (t.storage.kind !== 'external') return undefined;
    const ref = externalRef(t, 'model');
    const file = this.file();
    const len = t.storage.bytes.byteLength;
    // An input side file already named like ours (folding in/m.onnx with in/m.onnx.data to out/m.onnx): keep each
    // tensor's offset where it is free, so its entries stay exactly as they were.
    const same = posix.normalize(ref.location.replace(/\\/g, '/')) === this.location;
    const fits = same && (ref.length === undefined || ref.length === len) && ref.offset % 16 === 0;
    const free = fits && file.pieces.every((p) => p.offset + p.bytes.byteLength <= ref.offset || p.offset >= ref.offset + len);
    if (free) {
      file.pieces.push({ offset: ref.offset, bytes: t.storage.bytes });
      file.end = Math.max(file.end, ref.offset + len);
      return t.storage.entries.map(([k, v]) => [k, k === 'location' ? this.location : v]);
    }
    return this.append(t, 16);
  }

  private file(): SideFile {
    let f = this.files.get(this.location);
    if (!f) { f = { location: this.location, pieces: [], end: 0 }; this.files.set(this.location, f); }
    return f;
  }

  private append(t: Tensor, align: number): Array<[string, string]> {
    const f = this.file();
    const bytes = t.storage.kind === 'raw' || t.storage.kind === 'external' ? t.storage.bytes : new Uint8Array(0);
    const offset = Math.ceil(f.end / align) * align;
    f.pieces.push({ offset, bytes });
    f.end = offset + bytes.byteLength;
    return [['location', this.location], ['offset', String(offset)], ['length', String(bytes.byteLength)]];
  }
}

/** The side file an output model's external data goes to: the output's file name plus `.data`. */
export function sideFileName(outName: string): string {
  return `${outName}.data`;
}

/**
 * Emit modelled fields and untouched extra fields, following the original field order where there is one.
 * Runs once per changed message (tens of thousands in a large fold), so it keeps to small arrays and a bit set.
 */
function assemble(e: Emitter, order: number[] | undefined, extra: RawField[], modelled: Array<[number, (e: Emitter) => void]>): void {
  let done = 0; // bit i: modelled[i] emitted (a message models fewer than 31 fields)
  const used = extra.length ? new Array<boolean>(extra.length).fill(false) : undefined;
  if (order) {
    for (const no of order) {
      let i = 0;
      while (i < modelled.length && modelled[i]![0] !== no) i++;
      if (i < modelled.length) {
        if (!(done & (1 << i))) { modelled[i]![1](e); done |= 1 << i; }
      } else if (used) {
        // the next unused extra field of this number, in the order they were kept
        for (let k = 0; k < extra.length; k++) {
          if (!used[k] && extra[k]!.field === no) { used[k] = true; e.bytes(extra[k]!.bytes); break; }
        }
      }
    }
  }
  for (let i = 0; i < modelled.length; i++) if (!(done & (1 << i))) modelled[i]![1](e);
  if (!used) return;
  // extra fields left over, grouped by field number in order of first appearance (as they were queued)
  const seen: number[] = [];
  for (const r of extra) if (!seen.includes(r.field)) seen.push(r.field);
  for (const no of seen) for (let k = 0; k < extra.length; k++) if (!used[k] && extra[k]!.field === no) e.bytes(extra[k]!.bytes);
}

function piece(e: Emitter): Piece {
  const { chunks, length } = e.take();
  return { chunks, length, same: false };
}

function sub(e: Emitter, no: number, p: Piece): void {
  if (p instanceof PlainNode || p instanceof PlainTensor) {
    e.tag(no, WT_LEN); e.varint(p.length);
    const at = e.length;
    p.write(e);
    if (e.length - at !== p.length) throw new Error(`writer: a message of ${p.length} bytes came out as ${e.length - at}`);
    return;
  }
  emitMessage(e, no, p.chunks, p.length);
}

/** A message re-emitted as the bytes it was read from (the caller checked that nothing changed). */
function original(origin: Origin): Piece {
  return { chunks: [origin.buf.subarray(origin.start, origin.end)], length: origin.end - origin.start, same: true };
}

function kid(p: Piece): Kid {
  return p.same ? p.chunks[0] : undefined;
}

class Encoder {
  constructor(private plan: ExternalPlan) {}

  tensor(t: Tensor): Piece {
    const placed = this.plan.place(t);
    const wasExternal = t.storage.kind === 'external';
    const sameEntries = placed !== undefined && wasExternal &&
      JSON.stringify(placed) === JSON.stringify((t.storage as { entries: unknown }).entries);
    if ((placed === undefined && !wasExternal) || sameEntries) {
      if (tensorUnchanged(t)) return original(t.origin!);
    }
    // the common changed tensor (a folded weight, a new bias): no field order to follow, nothing unknown to keep
    if (!placed && !t.origin && !t.extra.length && (t.storage.kind === 'raw' || t.storage.kind === 'external')) return new PlainTensor(t, t.storage.bytes);
    const e = new Emitter();
    const order = fieldOrder(t.origin);
    const s = t.storage;
    const data: Array<[number, (e: Emitter) => void]> = [];
    if (placed) {
      data.push([13, (e) => {
        for (const [k, v] of placed) {
          const kv = new Emitter();
          emitString(kv, 1, k); emitString(kv, 2, v);
          sub(e, 13, piece(kv));
        }
      }]);
      data.push([14, (e) => emitInt(e, 14, 1)]);
    } else {
      switch (s.kind) {
        case 'raw': case 'external': data.push([9, (e) => emitBytes(e, 9, s.bytes)]); break;
        case 'float_data': data.push([4, (e) => {
          if (!s.values.length) return;
          e.tag(4, WT_LEN); e.varint(s.values.length * 4);
          e.bytes(new Uint8Array(s.values.buffer, s.values.byteOffset, s.values.byteLength).slice());
        }]); break;
        case 'double_data': data.push([10, (e) => {
          if (!s.values.length) return;
          e.tag(10, WT_LEN); e.varint(s.values.length * 8);
          e.bytes(new Uint8Array(s.values.buffer, s.values.byteOffset, s.values.byteLength).slice());
        }]); break;
        case 'int32_data': data.push([5, (e) => packedVarints(e, 5, Array.from(s.values))]); break;
        case 'int64_data': data.push([7, (e) => packedBig(e, 7, s.values)]); break;
        case 'uint64_data': data.push([11, (e) => packedBig(e, 11, s.values)]); break;
        case 'string_data': data.push([6, (e) => s.values.forEach((v) => emitBytes(e, 6, v))]); break;
        case 'empty': break;
      }
    }
    const fields: Array<[number, (e: Emitter) => void]> = [
      [1, (e) => t.dims.forEach((d) => emitInt(e, 1, d))],
      [2, (e) => emitInt(e, 2, t.dataType)],
      ...data,
      [8, (e) => { if (t.name || order.includes(8)) emitString(e, 8, t.name); }],
      [12, (e) => { if (t.docString) emitString(e, 12, t.docString); }],
    ];
    fields.sort((a, b) => a[0] - b[0]);
    assemble(e, order, t.extra, fields);
    return piece(e);
  }

  valueInfo(v: ValueInfo): Piece {
    if (valueInfoUnchanged(v)) return original(v.origin!);
    const e = new Emitter();
    const sameType = typeUnchanged(v);
    assemble(e, fieldOrder(v.origin), v.extra, [
      [1, (e) => emitString(e, 1, v.name)],
      [2, (e) => {
        if (sameType) { emitBytes(e, 2, v.typeBytes!); return; }
        if (v.elemType === undefined) return;
        const tt = new Emitter();
        emitInt(tt, 1, v.elemType);
        if (v.shape) sub(tt, 2, encodeShape(v.shape));
        const tp = new Emitter();
        sub(tp, 1, piece(tt));
        sub(e, 2, piece(tp));
      }],
      [3, (e) => { if (v.docString) emitString(e, 3, v.docString); }],
    ]);
    return piece(e);
  }

  attribute(a: Attribute): Piece {
    const v = a.value;
    const kids: Piece[] = [];
    if (v.type === 'TENSOR') kids.push(this.tensor(v.t));
    else if (v.type === 'TENSORS') kids.push(...v.tensors.map((t) => this.tensor(t)));
    else if (v.type === 'GRAPH') kids.push(this.graph(v.g));
    else if (v.type === 'GRAPHS') kids.push(...v.graphs.map((g) => this.graph(g)));
    if (attributeUnchanged(a, kids.map(kid))) return original(a.origin!);
    const e = new Emitter();
    const codes: Record<string, number> = { FLOAT: 1, INT: 2, STRING: 3, TENSOR: 4, GRAPH: 5, FLOATS: 6, INTS: 7, STRINGS: 8, TENSORS: 9, GRAPHS: 10 };
    const fields: Array<[number, (e: Emitter) => void]> = [[1, (e) => emitString(e, 1, a.name)]];
    switch (v.type) {
      case 'FLOAT': fields.push([2, (e) => emitFloat(e, 2, v.f)]); break;
      case 'INT': fields.push([3, (e) => emitInt(e, 3, v.i)]); break;
      case 'STRING': fields.push([4, (e) => emitBytes(e, 4, v.s)]); break;
      case 'TENSOR': fields.push([5, (e) => sub(e, 5, kids[0]!)]); break;
      case 'GRAPH': fields.push([6, (e) => sub(e, 6, kids[0]!)]); break;
      case 'FLOATS': fields.push([7, (e) => v.floats.forEach((f) => emitFloat(e, 7, f))]); break;
      case 'INTS': fields.push([8, (e) => v.ints.forEach((i) => emitInt(e, 8, i))]); break;
      case 'STRINGS': fields.push([9, (e) => v.strings.forEach((s) => emitBytes(e, 9, s))]); break;
      case 'TENSORS': fields.push([10, (e) => kids.forEach((k) => sub(e, 10, k))]); break;
      case 'GRAPHS': fields.push([11, (e) => kids.forEach((k) => sub(e, 11, k))]); break;
      case 'OTHER': break;
    }
    fields.push([13, (e) => { if (a.docString) emitString(e, 13, a.docString); }]);
    fields.push([20, (e) => emitInt(e, 20, v.type === 'OTHER' ? v.code : codes[v.type]!)]);
    fields.push([21, (e) => { if (a.refAttrName) emitString(e, 21, a.refAttrName); }]);
    assemble(e, fieldOrder(a.origin), a.extra, fields);
    return piece(e);
  }

  node(n: Node): Piece {
    const kids = n.attributes.map((a) => this.attribute(a));
    // a changed node with no field order to follow and nothing unknown to keep
    if (!n.origin && !n.extra.length) return new PlainNode(n, kids);
    if (nodeUnchanged(n, kids.map(kid))) return original(n.origin!);
    const e = new Emitter();
    const order = fieldOrder(n.origin);
    assemble(e, order, n.extra, [
      [1, (e) => n.inputs.forEach((s) => emitString(e, 1, s))],
      [2, (e) => n.outputs.forEach((s) => emitString(e, 2, s))],
      [3, (e) => { if (n.name || order.includes(3)) emitString(e, 3, n.name); }],
      [4, (e) => emitString(e, 4, n.opType)],
      [5, (e) => kids.forEach((k) => sub(e, 5, k))],
      [6, (e) => { if (n.docString) emitString(e, 6, n.docString); }],
      [7, (e) => { if (n.domain || order.includes(7)) emitString(e, 7, n.domain); }],
    ]);
    return piece(e);
  }

  graph(g: Graph): Piece {
    const nodes = g.nodes.map((n) => this.node(n));
    const inits = g.initializers.map((t) => this.tensor(t));
    const ins = g.inputs.map((v) => this.valueInfo(v));
    const outs = g.outputs.map((v) => this.valueInfo(v));
    const infos = g.valueInfo.map((v) => this.valueInfo(v));
    if (graphUnchanged(g, { nodes: nodes.map(kid), initializers: inits.map(kid), inputs: ins.map(kid), outputs: outs.map(kid), valueInfo: infos.map(kid) })) {
      return original(g.origin!);
    }
    const e = new Emitter();
    const order = fieldOrder(g.origin);
    assemble(e, order, g.extra, [
      [1, (e) => nodes.forEach((p) => sub(e, 1, p))],
      [2, (e) => { if (g.name || order.includes(2)) emitString(e, 2, g.name); }],
      [5, (e) => inits.forEach((p) => sub(e, 5, p))],
      [10, (e) => { if (g.docString) emitString(e, 10, g.docString); }],
      [11, (e) => ins.forEach((p) => sub(e, 11, p))],
      [12, (e) => outs.forEach((p) => sub(e, 12, p))],
      [13, (e) => infos.forEach((p) => sub(e, 13, p))],
    ]);
    return piece(e);
  }

  opset(o: OpsetImport): Piece {
    if (opsetUnchanged(o)) return original(o.origin!);
    const e = new Emitter();
    const order = fieldOrder(o.origin);
    assemble(e, order, o.extra, [
      [1, (e) => { if (o.domain || order.includes(1)) emitString(e, 1, o.domain); }],
      [2, (e) => emitInt(e, 2, o.version)],
    ]);
    return piece(e);
  }

  model(m: Model): Piece {
    const graph = this.graph(m.graph);
    const opsets = m.opsets.map((o) => this.opset(o));
    if (modelUnchanged(m, kid(graph), opsets.map(kid))) return original(m.origin!);
    const e = new Emitter();
    const order = fieldOrder(m.origin);
    const has = (no: number) => order.includes(no);
    assemble(e, order, m.extra, [
      [1, (e) => emitInt(e, 1, m.irVersion)],
      [2, (e) => { if (m.producerName || has(2)) emitString(e, 2, m.producerName); }],
      [3, (e) => { if (m.producerVersion || has(3)) emitString(e, 3, m.producerVersion); }],
      [4, (e) => { if (m.domain || has(4)) emitString(e, 4, m.domain); }],
      [5, (e) => { if (m.modelVersion || has(5)) emitInt(e, 5, m.modelVersion); }],
      [6, (e) => { if (m.docString || has(6)) emitString(e, 6, m.docString); }],
      [7, (e) => sub(e, 7, graph)],
      [8, (e) => opsets.forEach((p) => sub(e, 8, p))],
      [14, (e) => m.metadata.forEach(([k, v]) => {
        const kv = new Emitter();
        emitString(kv, 1, k); emitString(kv, 2, v);
        sub(e, 14, piece(kv));
      })],
    ]);
    return piece(e);
  }
}

// ---- changed messages with no original bytes, written straight into their parent ----------------------
// A fold changes tens of thousands of tensors and nodes, each without an origin (touched) and with no unknown
// fields. Such a message is not encoded on its own: its exact size is worked out, and its fields are written
// into the bytes of the graph that holds it when the graph is encoded (see sub), in the field order the general
// path gives them (field number order). Encoded apart, each was written three times (its own array, a view of
// it, the graph's copy), with an array and a view made per message.

/** A changed node with nothing to keep of how it was read: inputs (1), outputs (2), name (3) when set, op type
 * (4), attributes (5), doc string (6) when set, domain (7) when set. */
class PlainNode implements Piece {
  readonly chunks = NO_CHUNKS;
  readonly same = false;
  readonly length: number;
  constructor(readonly node: Node, readonly kids: Piece[]) {
    const n = node;
    let size = 0;
    for (let i = 0; i < n.inputs.length; i++) size += stringField(n.inputs[i]!);
    for (let i = 0; i < n.outputs.length; i++) size += stringField(n.outputs[i]!);
    if (n.name) size += stringField(n.name);
    size += stringField(n.opType);
    for (let i = 0; i < kids.length; i++) size += 1 + varintSize(kids[i]!.length) + kids[i]!.length;
    if (n.docString) size += stringField(n.docString);
    if (n.domain) size += stringField(n.domain);
    this.length = size;
  }

  write(e: Emitter): void {
    const n = this.node;
    for (let i = 0; i < n.inputs.length; i++) emitString(e, 1, n.inputs[i]!);
    for (let i = 0; i < n.outputs.length; i++) emitString(e, 2, n.outputs[i]!);
    if (n.name) emitString(e, 3, n.name);
    emitString(e, 4, n.opType);
    for (let i = 0; i < this.kids.length; i++) sub(e, 5, this.kids[i]!);
    if (n.docString) emitString(e, 6, n.docString);
    if (n.domain) emitString(e, 7, n.domain);
  }
}

/** A changed tensor with raw data and nothing to keep of how it was read: dims (1), data type (2), name (8) when
 * set, raw data (9), doc string (12) when set. */
class PlainTensor implements Piece {
  readonly chunks = NO_CHUNKS;
  readonly same = false;
  readonly length: number;
  constructor(readonly tensor: Tensor, readonly raw: Uint8Array) {
    const t = tensor;
    let size = 1 + varintLength(t.dataType);
    // (indexed loops: dims lists read from a file may be frozen and shared, and an iterator per tensor showed)
    for (let i = 0; i < t.dims.length; i++) size += 1 + varintLength(t.dims[i]!);
    if (t.name) size += stringField(t.name);
    size += 1 + varintSize(raw.byteLength) + raw.byteLength;
    if (t.docString) size += stringField(t.docString);
    this.length = size;
  }

  write(e: Emitter): void {
    const t = this.tensor;
    for (let i = 0; i < t.dims.length; i++) emitInt(e, 1, t.dims[i]!);
    emitInt(e, 2, t.dataType);
    if (t.name) emitString(e, 8, t.name);
    emitBytes(e, 9, this.raw); // (payloads past the emitter's copy size stay views, read from disk when written)
    if (t.docString) emitString(e, 12, t.docString);
  }
}

const NO_CHUNKS: Uint8Array[] = Object.freeze([]) as unknown as Uint8Array[];

const varintSize = (v: number): number => {
  let n = 1;
  while (v >= 128) { v = Math.floor(v / 128); n++; }
  return n;
};

/** Bytes of a varint as emitInt writes it (a negative number takes ten: int64 two's complement). */
const varintLength = (v: number): number => (v < 0 ? 10 : varintSize(v));

const utf8e = new TextEncoder();

/** Bytes of a string field with a one-byte tag (every field number here is below 16), as emitString writes it. */
function stringField(s: string): number {
  let n = s.length;
  for (let i = 0; i < s.length; i++) {
    if (s.charCodeAt(i) >= 0x80) { n = utf8e.encode(s).byteLength; break; }
  }
  return 1 + varintSize(n) + n;
}

function encodeShape(shape: Dim[]): Piece {
  const e = new Emitter();
  for (const d of shape) {
    const de = new Emitter();
    if (typeof d === 'number') emitInt(de, 1, d);
    else if (typeof d === 'string') emitString(de, 2, d);
    sub(e, 1, piece(de));
  }
  return piece(e);
}

function packedVarints(e: Emitter, no: number, values: number[]): void {
  if (!values.length) return;
  const inner = new Emitter();
  for (const v of values) inner.varint(v);
  const p = piece(inner);
  sub(e, no, p);
}

function packedBig(e: Emitter, no: number, values: BigInt64Array | BigUint64Array): void {
  if (!values.length) return;
  const inner = new Emitter();
  for (const v of values) inner.varintBig(v);
  sub(e, no, piece(inner));
}

export interface Serialized {
  chunks: Uint8Array[];
  length: number;
  sideFiles: SideFile[];
}

/** Encode a model; `outPath` decides the names of side files for external data. */
export function serializeModelParts(model: Model, outPath: string, opts: WriteOptions = {}): Serialized {
  const plan = new ExternalPlan(basename(outPath), opts);
  const p = new Encoder(plan).model(model);
  return { chunks: p.chunks, length: p.length, sideFiles: [...plan.files.values()] };
}

/** Encode a model with all tensors inline (no side files) into one byte array. */
export function serializeModel(model: Model): Uint8Array {
  const parts = serializeModelParts(model, join(model.baseDir, 'model.onnx'));
  if (parts.sideFiles.length) throw new PleatError('bad-input', 'model has external data: write it with writeModelFile');
  const out = new Uint8Array(parts.length);
  let o = 0;
  for (const c of parts.chunks) { ensureLoaded(c); out.set(c, o); o += c.byteLength; }
  return out;
}

// 1 MiB: a block read, changed and written stays in the core's cache between the three (8 MiB blocks, leaving
// it, made the three passes over the 378 MB benchmark model ~190 ms against ~150 ms).
const STREAM_BLOCK = 1024 * 1024;

/** Write bytes at a file position; parts of a sparsely read model still on disk are streamed from its file. */
function writeAt(fd: number, bytes: Uint8Array, at: number, scratch: { buf?: Uint8Array }): void {
  const src = lazySourceOf(bytes);
  const pending = src ? pendingIn(src, bytes) : [];
  const base = src ? bytes.byteOffset - src.byteOffset : 0;
  let done = 0;
  const plain = (upTo: number) => {
    while (done < upTo) done += writeSync(fd, bytes, done, upTo - done, at + done);
  };
  if (!pending.length) { plain(bytes.byteLength); return; }
  const inFd = reopenSource(src!);
  try {
    // Copy file bytes [s, e) to the output through the scratch buffer, applying `change` to each block read (in the
    // buffer the change offers, when it offers one: e.g. the SIMD kernel's own memory, saving two copies a block).
    const stream = (s: number, e: number, change?: (block: Uint8Array, at: number) => void, offered?: BlockBuffer) => {
      const buf = offered?.(STREAM_BLOCK) ?? (scratch.buf ??= new Uint8Array(STREAM_BLOCK));
      for (let pos = s; pos < e;) {
        const want = Math.min(buf.byteLength, e - pos);
        let n = 0;
        while (n < want) {
          const got = readSync(inFd, buf, n, want - n, pos + n);
          if (got <= 0) throw new PleatError('bad-input', `${src!.path}: the input changed while being copied`);
          n += got;
        }
        const block = buf.subarray(0, n);
        change?.(block, pos);
        let w = 0;
        while (w < n) w += writeSync(fd, block, w, n - w, at + (pos - base) + w);
        pos += n;
      }
    };
    for (const [s, e] of pending) {
      plain(s - base);
      // split the pending part at deferred changes, so each change sees blocks starting at its own start
      let pos = s;
      for (const d of deferredIn(src!, s, e)) {
        const from = Math.max(d.start, s), to = Math.min(d.end, e);
        if (from > pos) stream(pos, from);
        stream(from, to, d.apply, d.buffer);
        pos = to;
      }
      if (pos < e) stream(pos, e);
      done = e - base;
    }
    plain(bytes.byteLength);
  } finally {
    closeSync(inFd);
  }
}

function writeChunks(path: string, chunks: Iterable<{ offset?: number; bytes: Uint8Array }>): void {
  const list = [...chunks];
  // A model written with no change is its source file, byte for byte: let the kernel copy it.
  if (list.length === 1 && list[0]!.offset === undefined) {
    const src = lazySourceOf(list[0]!.bytes);
    if (src && !src.deferred.length && list[0]!.bytes.byteOffset === src.byteOffset && list[0]!.bytes.byteLength === src.size) {
      closeSync(reopenSource(src)); // refuses a source that changed since it was read
      copyFileSync(src.path, path);
      return;
    }
  }
  const fd = openSync(path, 'w');
  const scratch: { buf?: Uint8Array } = {};
  try {
    let pos = 0;
    for (const c of list) {
      const at = c.offset ?? pos;
      writeAt(fd, c.bytes, at, scratch);
      pos = at + c.bytes.byteLength;
    }
  } finally {
    closeSync(fd);
  }
}

/** A file written to a temporary name, to be renamed to `dest` once everything is decided and checked. */
/** A file (or, with `folder`, a folder of files) written at a temporary name, renamed to `dest` at commit. */
export interface StagedFile { tmp: string; dest: string; folder?: true }

export interface StagedModel {
  /** The model file, then its side file (when it has one). */
  files: StagedFile[];
  bytes: number;
  /** Side-file destination -> its temporary name, for reading the staged model back (readModelFile's redirect). */
  redirect: Map<string, string>;
}

/**
 * Write a model and its side file to temporary names given by `tempFor(dest)` (in the destination's folder). The
 * caller renames them in (or removes them). On failure nothing staged is left behind.
 */
export function stageModelFile(model: Model, path: string, opts: WriteOptions, tempFor: (dest: string) => string): StagedModel {
  const target = resolve(path);
  const parts = serializeModelParts(model, target, opts);
  const files: StagedFile[] = [];
  try {
    for (const f of parts.sideFiles) {
      const dest = resolve(dirname(target), f.location);
      const tmp = tempFor(dest);
      files.push({ tmp, dest });
      writeChunks(tmp, [...f.pieces].sort((a, b) => a.offset - b.offset));
    }
    const tmp = tempFor(target);
    files.unshift({ tmp, dest: target });
    writeChunks(tmp, parts.chunks.map((bytes) => ({ bytes })));
  } catch (e) {
    for (const f of files) rmSync(f.tmp, { force: true });
    const code = (e as NodeJS.ErrnoException).code;
    if (e instanceof PleatError || code === undefined) throw e; // ours, or a change that refused to finish
    if (code === 'ENOENT' && !existsSync(dirname(target))) throw new PleatError('bad-input', `${path}: the folder ${dirname(target)} does not exist`);
    throw new PleatError('bad-input', `${path}: cannot write (${code})`);
  }
  return { files, bytes: parts.length, redirect: new Map(files.slice(1).map((f) => [f.dest, f.tmp])) };
}

/**
 * Write a model (and its side file) atomically: everything goes to temporary files first, then each is renamed
 * into place, so a failure never leaves a partial output. The model's own source and side files are never
 * overwritten (compared by real path and inode, so links and other spellings are caught).
 */
export function writeModelFile(model: Model, path: string, opts: WriteOptions = {}): { bytes: number; sideFiles: string[] } {
  const target = resolve(path);
  const inputs = model.sourcePath ? [model.sourcePath, ...sideFilePaths(model)] : [];
  const guard = (dest: string, what: string) => {
    for (const i of inputs) if (sameFile(dest, i)) throw new PleatError('bad-input', `${path}: ${what} ${dest} is the input ${i}; choose another output path`);
    const special = specialKind(entryAt(dest, `${path}: ${what} ${dest}`));
    if (special) throw new PleatError('bad-input', `${path}: ${what} ${dest} is ${special}, not a file; writing the model into place would replace it`);
  };
  guard(target, 'the output');
  guard(resolve(dirname(target), sideFileName(basename(target))), 'its side file');
  // temporaries named as the output transaction names its own (src/jobs/outputs.ts), each in an intent record
  // first, so a run killed here leaves nothing a later run would not know to remove
  const intents = new IntentLog(`.pleat-${process.pid}-w${randomBytes(4).toString('hex')}`);
  let counter = 0;
  const tempFor = (dest: string) => {
    const tmp = join(dirname(dest), `${intents.stem}${counter++}-${basename(dest)}.tmp`);
    intents.note(tmp);
    return tmp;
  };
  try {
    const staged = stageModelFile(model, target, opts, tempFor);
    try {
      for (const f of staged.files) renameSync(f.tmp, f.dest);
    } catch (e) {
      for (const f of staged.files) rmSync(f.tmp, { force: true });
      throw new PleatError('bad-input', `${path}: cannot write (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
    }
    return { bytes: staged.bytes, sideFiles: staged.files.slice(1).map((f) => f.dest) };
  } finally {
    intents.clear();
  }
}
