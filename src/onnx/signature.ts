// Change detection for the lossless writer. Nothing is recorded when a model is read (survey and audit never
// write, so they pay nothing): when the writer meets a message that still has its origin, it decodes the
// message's original bytes again, its own fields only (children stay byte ranges), and compares them with the
// current object. Equal means re-encoding would give those bytes back, so the writer re-emits them.
//
// Children are compared by position: an unchanged child re-emits its own original bytes, and those must sit
// exactly where the parent's bytes hold that child (same buffer, same offsets, same order). Values held in
// place (raw tensor bytes, unknown fields) are compared by position too, so the check never reads payloads
// that are still on disk; code that writes into such bytes in place calls touch() (src/graph/edit.ts).
import type {
  Attribute, Dim, Graph, Model, Node, OpsetImport, Origin, RawField, Tensor, TensorStorage, ValueInfo,
} from '../graph/ir.js';
import { WT_LEN, WireError, fieldsOf, readString, type WireField } from './wire.js';
import {
  decodeAttribute, decodeGraph, decodeModelFields, decodeOpset, decodeTensor, decodeTensorType,
  decodeValueInfo, type KidRanges,
} from './read.js';

/** A child as the writer encoded it: its original bytes when it is unchanged, else undefined. */
export type Kid = Uint8Array | undefined;

/** Whether `v` is exactly buf[start, end) (the same memory, not merely equal bytes). */
function sameView(v: Uint8Array, buf: Uint8Array, start: number, end: number): boolean {
  return v.buffer === buf.buffer && v.byteOffset === buf.byteOffset + start && v.byteLength === end - start;
}

function sameBytes(a: Uint8Array, b: Uint8Array): boolean {
  if (a.byteLength !== b.byteLength) return false;
  for (let i = 0; i < a.byteLength; i++) if (a[i] !== b[i]) return false;
  return true;
}

function sameList<T>(a: readonly T[], b: readonly T[], eq: (x: T, y: T) => boolean = Object.is): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (!eq(a[i]!, b[i]!)) return false;
  return true;
}

function sameExtra(now: RawField[], then: RawField[]): boolean {
  return sameList(now, then, (x, y) => x.field === y.field && x.bytes.buffer === y.bytes.buffer &&
    x.bytes.byteOffset === y.bytes.byteOffset && x.bytes.byteLength === y.bytes.byteLength);
}

/** The children of field `no`, in order, are exactly the original ones, each unchanged. */
function sameKids(kids: readonly Kid[], ranges: KidRanges, no: number, buf: Uint8Array): boolean {
  let k = 0;
  for (let i = 0; i < ranges.length; i += 3) {
    if (ranges[i] !== no) continue;
    const kid = kids[k++];
    if (!kid || !sameView(kid, buf, ranges[i + 1]!, ranges[i + 2]!)) return false;
  }
  return k === kids.length;
}

/** The last child of field `no` (a singular message field: the last occurrence wins, as when decoding). */
function sameLastKid(kid: Kid, ranges: KidRanges, no: number, buf: Uint8Array): boolean {
  for (let i = ranges.length - 3; i >= 0; i -= 3) {
    if (ranges[i] === no) return kid !== undefined && sameView(kid, buf, ranges[i + 1]!, ranges[i + 2]!);
  }
  return false;
}

function sameTyped(a: ArrayBufferView, b: ArrayBufferView): boolean {
  return sameBytes(new Uint8Array(a.buffer, a.byteOffset, a.byteLength), new Uint8Array(b.buffer, b.byteOffset, b.byteLength));
}

function sameStorage(now: TensorStorage, then: TensorStorage, loaded: Uint8Array | undefined): boolean {
  if (now.kind !== then.kind) return false;
  switch (now.kind) {
    case 'empty': return true;
    case 'raw': {
      const b = (then as { bytes: Uint8Array }).bytes;
      return now.bytes.buffer === b.buffer && now.bytes.byteOffset === b.byteOffset && now.bytes.byteLength === b.byteLength;
    }
    case 'external': {
      const t = then as Extract<TensorStorage, { kind: 'external' }>;
      const sameEntries = sameList(now.entries, t.entries, (x, y) => x[0] === y[0] && x[1] === y[1]);
      // the loaded bytes are the object the reader put there, or nothing was loaded at all
      return sameEntries && (loaded !== undefined ? now.bytes === loaded : now.bytes.byteLength === 0);
    }
    case 'string_data': return sameList(now.values, (then as { values: Uint8Array[] }).values, sameBytes);
    default: return sameTyped(now.values, (then as { values: ArrayBufferView }).values);
  }
}

export function tensorUnchanged(t: Tensor): boolean {
  const o = t.origin;
  if (!o) return false;
  const was = decodeTensor(o.buf, o.start, o.end);
  return t.name === was.name && t.dataType === was.dataType && t.docString === was.docString &&
    sameList(t.dims, was.dims) && sameExtra(t.extra, was.extra) && sameStorage(t.storage, was.storage, o.loaded);
}

function sameDims(a: Dim[] | undefined, b: Dim[] | undefined): boolean {
  return a === undefined || b === undefined ? a === b : sameList(a, b);
}

/** Whether a value's type still reads as the TypeProto it was read with (`typeBytes`). */
export function typeUnchanged(v: ValueInfo): boolean {
  if (v.typeBytes === undefined) return false;
  const was: Pick<ValueInfo, 'elemType' | 'shape'> = {};
  decodeTensorType(v.typeBytes, 0, v.typeBytes.byteLength, was);
  return v.elemType === was.elemType && sameDims(v.shape, was.shape);
}

export function valueInfoUnchanged(v: ValueInfo): boolean {
  const o = v.origin;
  if (!o) return false;
  const was = decodeValueInfo(o.buf, o.start, o.end);
  return v.name === was.name && v.docString === was.docString && v.elemType === was.elemType &&
    sameDims(v.shape, was.shape) && sameExtra(v.extra, was.extra);
}

export function opsetUnchanged(op: OpsetImport): boolean {
  const o = op.origin;
  if (!o) return false;
  const was = decodeOpset(o.buf, o.start, o.end);
  return op.domain === was.domain && op.version === was.version && sameExtra(op.extra, was.extra);
}

/** `kids`: the attribute's tensors or graphs as encoded (empty for other types). */
export function attributeUnchanged(a: Attribute, kids: readonly Kid[]): boolean {
  const o = a.origin;
  if (!o) return false;
  const ranges: KidRanges = [];
  const was = decodeAttribute(o.buf, o.start, o.end, 0, ranges);
  if (a.name !== was.name || a.docString !== was.docString || a.refAttrName !== was.refAttrName ||
    a.value.type !== was.value.type || !sameExtra(a.extra, was.extra)) return false;
  const v = a.value, w = was.value;
  switch (v.type) {
    case 'FLOAT': return Object.is(v.f, (w as { f: number }).f);
    case 'INT': return v.i === (w as { i: number }).i;
    case 'STRING': return sameBytes(v.s, (w as { s: Uint8Array }).s);
    case 'FLOATS': return sameList(v.floats, (w as { floats: number[] }).floats);
    case 'INTS': return sameList(v.ints, (w as { ints: number[] }).ints);
    case 'STRINGS': return sameList(v.strings, (w as { strings: Uint8Array[] }).strings, sameBytes);
    case 'TENSOR': return kids.length === 1 && sameLastKid(kids[0], ranges, 5, o.buf);
    case 'GRAPH': return kids.length === 1 && sameLastKid(kids[0], ranges, 6, o.buf);
    case 'TENSORS': return sameKids(kids, ranges, 10, o.buf);
    case 'GRAPHS': return sameKids(kids, ranges, 11, o.buf);
    case 'OTHER': return v.code === (w as { code: number }).code;
  }
}

/**
 * Whether `s` is what buf[start, end) decodes to (as readString decodes it). ASCII bytes are compared with the
 * characters in place: a graph's unchanged nodes are some 10^5 names, and decoding each to compare it made as
 * many strings.
 */
function sameString(s: string, buf: Uint8Array, start: number, end: number): boolean {
  for (let i = start; i < end; i++) {
    const b = buf[i]!;
    if (b >= 0x80) return readString(buf, { vstart: start, vend: end } as WireField) === s; // (up to here every byte was one character)
    if (b !== s.charCodeAt(i - start)) return false;
  }
  return s.length === end - start;
}

/** A singular string field: the last occurrence at [start, end), or '' when there was none (start -1). */
function sameLast(s: string, buf: Uint8Array, start: number, end: number): boolean {
  return start < 0 ? s === '' : sameString(s, buf, start, end);
}

/** Whether a node's kept unknown field is exactly the field read at `f` (same bytes, same place). */
function sameRaw(r: RawField | undefined, buf: Uint8Array, f: WireField): boolean {
  return r !== undefined && r.field === f.no && sameView(r.bytes, buf, f.start, f.end);
}

/**
 * `attrs`: the node's attributes as encoded. The node's fields are compared with its original bytes as they are
 * walked (what decodeNode would give, field by field, the last of a repeated singular field winning), without
 * decoding a node to compare it with.
 */
export function nodeUnchanged(n: Node, attrs: readonly Kid[]): boolean {
  const o = n.origin;
  if (!o) return false;
  const buf = o.buf;
  let ins = 0, outs = 0, kids = 0, extras = 0;
  // where the last name (3), op type (4), doc string (6) and domain (7) are: [start, end] each, -1 when absent
  let name0 = -1, name1 = -1, op0 = -1, op1 = -1, doc0 = -1, doc1 = -1, dom0 = -1, dom1 = -1;
  for (const f = fieldsOf(buf, o.start, o.end); f.next();) {
    switch (f.no) {
      case 1: if (ins >= n.inputs.length || !sameString(n.inputs[ins++]!, buf, f.vstart, f.vend)) return false; break;
      case 2: if (outs >= n.outputs.length || !sameString(n.outputs[outs++]!, buf, f.vstart, f.vend)) return false; break;
      case 3: name0 = f.vstart; name1 = f.vend; break;
      case 4: op0 = f.vstart; op1 = f.vend; break;
      case 5: {
        if (f.wt !== WT_LEN) throw new WireError(`attribute: field ${f.no} has wire type ${f.wt}, expected a length-delimited field`);
        const kid = attrs[kids++];
        if (!kid || !sameView(kid, buf, f.vstart, f.vend)) return false;
        break;
      }
      case 6: doc0 = f.vstart; doc1 = f.vend; break;
      case 7: dom0 = f.vstart; dom1 = f.vend; break;
      default: if (!sameRaw(n.extra[extras++], buf, f)) return false;
    }
  }
  return ins === n.inputs.length && outs === n.outputs.length && kids === attrs.length && extras === n.extra.length &&
    sameLast(n.name, buf, name0, name1) && sameLast(n.opType, buf, op0, op1) && sameLast(n.docString, buf, doc0, doc1) &&
    sameLast(n.domain, buf, dom0, dom1);
}

export interface GraphKids { nodes: Kid[]; initializers: Kid[]; inputs: Kid[]; outputs: Kid[]; valueInfo: Kid[] }

export function graphUnchanged(g: Graph, kids: GraphKids): boolean {
  const o = g.origin;
  if (!o) return false;
  const ranges: KidRanges = [];
  const was = decodeGraph(o.buf, o.start, o.end, 0, ranges);
  return g.name === was.name && g.docString === was.docString && sameExtra(g.extra, was.extra) &&
    sameKids(kids.nodes, ranges, 1, o.buf) && sameKids(kids.initializers, ranges, 5, o.buf) &&
    sameKids(kids.inputs, ranges, 11, o.buf) && sameKids(kids.outputs, ranges, 12, o.buf) &&
    sameKids(kids.valueInfo, ranges, 13, o.buf);
}

export function modelUnchanged(m: Model, graph: Kid, opsets: readonly Kid[]): boolean {
  const o = m.origin;
  if (!o) return false;
  const ranges: KidRanges = [];
  const was = decodeModelFields(o.buf, o.start, o.end, ranges);
  return m.irVersion === was.irVersion && m.producerName === was.producerName &&
    m.producerVersion === was.producerVersion && m.domain === was.domain && m.modelVersion === was.modelVersion &&
    m.docString === was.docString && sameExtra(m.extra, was.extra) &&
    sameList(m.metadata, was.metadata, (x, y) => x[0] === y[0] && x[1] === y[1]) &&
    sameLastKid(graph, ranges, 7, o.buf) && sameKids(opsets, ranges, 8, o.buf);
}

/** The field numbers of a message's original bytes, in order (kept when a changed message is re-encoded). */
export function fieldOrder(o: Origin | undefined): number[] {
  const order: number[] = [];
  if (o) for (const f = fieldsOf(o.buf, o.start, o.end); f.next();) order.push(f.no);
  return order;
}
