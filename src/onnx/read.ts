// Bytes -> IR. Every message keeps where its original bytes are (offsets into the file buffer) and the
// fields pleat does not model, so the writer can give them back unchanged.
import { closeSync, statSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import type {
  Attribute, AttributeValue, Dim, Graph, Model, Node, OpsetImport, Origin, RawField, Tensor, TensorStorage, ValueInfo,
} from '../graph/ir.js';
import { FileNode, FileSpans, FileTensor } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import {
  NameCache, WT_LEN, WireError, readFloat, readInt, readPackedFixed32, readPackedFixed64, readPackedVarints,
  readPackedVarintsBig, readString, readStringAt, fieldsOf, type WireField,
} from './wire.js';
import { loadExternalData } from './external.js';
import { validateModel } from '../graph/validate.js';
import { openForRead, readSparse } from './sparse-read.js';
import { memberOf } from '../graph/names.js';
import { pathProblem } from './paths.js';

type Buf = Uint8Array;

function raw(buf: Buf, f: WireField): RawField {
  return { field: f.no, bytes: buf.subarray(f.start, f.end) };
}

// Allocation matters here: a 10^5-node graph is some 3 x 10^5 messages, and every object the reader leaves behind
// is copied by the garbage collector while the rest is read. So lists are made at their final length (a list
// grown by push from empty keeps room for 17), messages are built in one literal with every field (a field added
// later moves to a side store), and a message without unknown fields shares one frozen empty `extra`.

/**
 * The attributes of a node that has none (shared and frozen: code that adds an attribute to a node read from a
 * file replaces the list; none pushes into it, and one that did would fail loudly rather than reach every node).
 */
const NO_ATTRIBUTES: Attribute[] = Object.freeze([]) as unknown as Attribute[];
/** The `extra` of a message with no unknown fields (shared; code that adds fields replaces the list). */
const NO_NAMES: readonly string[] = [];
const NO_EXTRA: RawField[] = Object.freeze([]) as unknown as RawField[];

/** Tensors with external data met since decodeModel began (none: parseModel skips the walk that loads them). */
let externalSeen = 0;

/** Names of the sparse initializers met since decodeModel began (kept as unknown fields; pleat cannot use them). */
let sparseSeen: string[] = [];

/** The name of a SparseTensorProto's values tensor (field 1, whose field 8 is the name). */
function sparseName(buf: Buf, start: number, end: number): string {
  let out = '';
  for (const f = fieldsOf(buf, start, end); f.next();) {
    if (f.no !== 1 || f.wt !== WT_LEN) continue;
    for (const t = fieldsOf(buf, f.vstart, f.vend); t.next();) if (t.no === 8 && t.wt === WT_LEN) out = readString(buf, t);
  }
  return out;
}

/** While decodeModel runs, every graph it decodes (main graph and subgraphs); undefined otherwise. */
let graphsRead: Graph[] | undefined;

/** While a model is read, the cache its names are decoded through (see NameCache); undefined otherwise. */
let interner: NameCache | undefined;

/** While a model is read, where its tensors' and nodes' bytes are (see FileSpans); undefined otherwise. */
let spans: FileSpans | undefined;

/** The spans of the model being read, or new ones for a message decoded on its own (a .pb tensor, the writer's checks). */
function spansFor(buf: Buf): FileSpans {
  return spans !== undefined && spans.buf === buf ? spans : new FileSpans(buf);
}

function nameAt(buf: Buf, start: number, end: number): string {
  return interner !== undefined && interner.buf === buf ? interner.name(start, end) : readStringAt(buf, start, end);
}

function name(buf: Buf, f: WireField): string {
  return nameAt(buf, f.vstart, f.vend);
}

/**
 * Scratch lists shared by every message, used as stacks: a message pushes above the length it found and takes
 * its part back out at the exact length, so a message decoded in between (a subgraph in an attribute) leaves
 * the part below it as it was.
 */
class Scratch<T> {
  private items: T[] = [];
  top = 0;
  push(v: T): void { this.items[this.top++] = v; }
  /** The entries above `base`, as a new list of exactly that length; the stack goes back to `base`. */
  take(base: number): T[] {
    if (this.top === base) return [];
    const out = this.items.slice(base, this.top);
    this.top = base; // entries above stay until overwritten (setting a list's length shrinks it, and then it regrows)
    return out;
  }
}
const scratchIn = new Scratch<string>();
const scratchOut = new Scratch<string>();
const scratchN: number[] = [];

/** The numbers pushed on `scratchN` above `base`, at their exact length. */
function takeNumbers(base: number): number[] {
  if (scratchN.length === base) return [];
  const out = scratchN.slice(base);
  while (scratchN.length > base) scratchN.pop();
  return out;
}

/** Slots of the dims cache (a graph has few distinct shapes; a repeat usually follows soon). */
const DIMS_SLOTS = 1024;
let dimsCache: Array<readonly number[] | undefined> | undefined;

/**
 * The dims pushed on `scratchN` above `base`. While a model is read they come from a small cache of frozen lists,
 * one per shape: 10^5 tensors of a few shapes made 10^5 lists otherwise. Frozen, so code that changed one in place
 * (none does: dims are replaced, see setTensorValues) would fail loudly rather than reshape other tensors.
 */
function takeDims(base: number): number[] {
  if (dimsCache === undefined) return takeNumbers(base);
  const n = scratchN.length - base;
  let h = n;
  for (let i = base; i < scratchN.length; i++) h = Math.imul(h ^ (scratchN[i]! | 0), 0x01000193) ^ Math.floor(scratchN[i]! / 4294967296);
  h = (h ^ (h >>> 13)) & (DIMS_SLOTS - 1);
  const hit = dimsCache[h];
  if (hit !== undefined && hit.length === n) {
    let j = 0;
    while (j < n && hit[j] === scratchN[base + j]) j++;
    if (j === n) {
      while (scratchN.length > base) scratchN.pop();
      return hit as number[];
    }
  }
  const dims = Object.freeze(takeNumbers(base));
  dimsCache[h] = dims;
  return dims as number[];
}

/** A list at its exact length (a list grown by push keeps spare room). */
function exact<T>(list: T[] | undefined): T[] {
  return list === undefined || list.length === 0 ? [] : list.slice();
}

function expectLen(f: WireField, what: string): void {
  if (f.wt !== WT_LEN) throw new WireError(`${what}: field ${f.no} has wire type ${f.wt}, expected a length-delimited field`);
}

/** Where a message's bytes are: offsets into the file buffer (no view, no copy). */
function origin(buf: Buf, start: number, end: number): Origin {
  return { buf, start, end };
}

/**
 * Child messages recorded as byte ranges instead of decoded: flat [field, start, end, ...]. The writer's change
 * check (src/onnx/signature.ts) decodes a message's own fields again this way, without its children.
 */
export type KidRanges = number[];

function withOnce(list: string[] | undefined, k: string): string[] {
  if (!list) return [k];
  if (!list.includes(k)) list.push(k);
  return list;
}

/** `names`: an initializer of a graph being read, whose name is looked for among its nodes' inputs (ReaderNames). */
export function decodeTensor(buf: Buf, start: number, end: number, names?: ReaderNames): Tensor {
  const f = fieldsOf(buf, start, end);
  const dimBase = scratchN.length;
  let dataType = 0, tname = '', docString = '';
  let storage: TensorStorage | undefined;
  let extra: RawField[] | undefined;
  // arrays only for the *_data fields present (most tensors use raw_data and need none)
  let floats: number[] | undefined, int32s: number[] | undefined, doubles: number[] | undefined;
  let int64s: bigint[] | undefined, uint64s: bigint[] | undefined, strings: Uint8Array[] | undefined;
  let external: Array<[string, string]> | undefined;
  let location = 0, rawStart = 0, rawEnd = 0, sawRaw = false;
  let kind: TensorStorage['kind'] | undefined;
  // typed data fields present, in the order first seen (a second one, or one beside raw_data, is invalid); a
  // list made only when there is one, since most tensors hold raw_data
  let typed: string[] | undefined;
  while (f.next()) {
    switch (f.no) {
      case 1: readPackedVarints(buf, f, scratchN); break;
      case 2: dataType = readInt(buf, f); break;
      case 4: readPackedFixed32(buf, f, floats ??= [], true); kind = 'float_data'; typed = withOnce(typed, kind); break;
      case 5: readPackedVarints(buf, f, int32s ??= []); kind = 'int32_data'; typed = withOnce(typed, kind); break;
      case 6: expectLen(f, 'string_data'); (strings ??= []).push(buf.subarray(f.vstart, f.vend)); kind = 'string_data'; typed = withOnce(typed, kind); break;
      case 7: readPackedVarintsBig(buf, f, int64s ??= []); kind = 'int64_data'; typed = withOnce(typed, kind); break;
      case 8: tname = names !== undefined ? names.sameAt(buf, f.vstart, f.vend) : name(buf, f); break;
      case 9: expectLen(f, 'raw_data'); rawStart = f.vstart; rawEnd = f.vend; sawRaw = true; kind = 'raw'; break;
      case 10: readPackedFixed64(buf, f, doubles ??= []); kind = 'double_data'; typed = withOnce(typed, kind); break;
      case 11: readPackedVarintsBig(buf, f, uint64s ??= []); kind = 'uint64_data'; typed = withOnce(typed, kind); break;
      case 12: docString = readString(buf, f); break;
      case 13: {
        expectLen(f, 'external_data');
        let k = '', v = '';
        for (const e = fieldsOf(buf, f.vstart, f.vend); e.next();) {
          if (e.no === 1) k = readString(buf, e);
          else if (e.no === 2) v = readString(buf, e);
        }
        (external ??= []).push([k, v]);
        break;
      }
      case 14: location = readInt(buf, f); break;
      default: (extra ??= []).push(raw(buf, f));
    }
  }
  const dims = takeDims(dimBase);
  // ONNX IR: a tensor's data lives in raw_data or in one typed *_data field, not both; runtimes disagree on
  // which one wins when several are present (onnx/onnx.proto3, TensorProto; the checker refuses it).
  const held = typed === undefined ? NO_NAMES : [...typed, ...(sawRaw ? ['raw_data'] : [])];
  if (held.length > 1) {
    throw new PleatError('bad-model', `tensor '${tname}' holds its data in both ${held.slice(0, -1).join(', ')} and ${held[held.length - 1]}; a tensor must use exactly one`);
  }
  if (location === 1) {
    externalSeen++;
    storage = { kind: 'external', entries: external ?? [], bytes: new Uint8Array(0) };
  } else {
    switch (kind) {
      case 'float_data': storage = { kind, values: Float32Array.from(floats!) }; break;
      case 'int32_data': storage = { kind, values: Int32Array.from(int32s!) }; break;
      case 'double_data': storage = { kind, values: Float64Array.from(doubles!) }; break;
      case 'int64_data': storage = { kind, values: BigInt64Array.from(int64s!) }; break;
      case 'uint64_data': storage = { kind, values: BigUint64Array.from(uint64s!) }; break;
      case 'string_data': storage = { kind, values: strings! }; break;
      default: break;
    }
  }
  let badDim = false;
  for (let i = 0; i < dims.length; i++) if (dims[i]! < 0 || !Number.isSafeInteger(dims[i])) badDim = true;
  if (badDim) {
    throw new PleatError('bad-model', `tensor '${tname}' has an invalid dimension in [${dims.join(',')}]`);
  }
  // data_location and external_data entries are modelled through storage; raw_data stays offsets until used
  const sp = spansFor(buf);
  return new FileTensor(tname, dims, dataType, sawRaw && location !== 1 ? undefined : storage ?? { kind: 'empty' }, sp,
    sp.add(start, end, rawStart, rawEnd), docString, extra ?? NO_EXTRA);
}

function decodeDims(buf: Buf, start: number, end: number): Dim[] {
  const dims: Dim[] = [];
  for (const f = fieldsOf(buf, start, end); f.next();) {
    if (f.no !== 1) continue;
    let d: Dim = null;
    for (const g = fieldsOf(buf, f.vstart, f.vend); g.next();) {
      if (g.no === 1) d = readInt(buf, g);
      else if (g.no === 2) d = readString(buf, g);
    }
    dims.push(d);
  }
  return dims;
}

/** The element type and shape of a TypeProto holding a tensor type (other types leave both undefined). */
export function decodeTensorType(buf: Buf, start: number, end: number, into: Pick<ValueInfo, 'elemType' | 'shape'>): void {
  for (const t = fieldsOf(buf, start, end); t.next();) {
    if (t.no !== 1) continue; // not a tensor type
    for (const tt = fieldsOf(buf, t.vstart, t.vend); tt.next();) {
      if (tt.no === 1) into.elemType = readInt(buf, tt);
      else if (tt.no === 2) into.shape = decodeDims(buf, tt.vstart, tt.vend);
    }
  }
}

export function decodeValueInfo(buf: Buf, start: number, end: number): ValueInfo {
  const f = fieldsOf(buf, start, end);
  const v: ValueInfo = { name: '', docString: '', extra: NO_EXTRA };
  while (f.next()) {
    switch (f.no) {
      case 1: v.name = name(buf, f); break;
      case 2: {
        expectLen(f, 'value type');
        v.typeBytes = buf.subarray(f.vstart, f.vend);
        decodeTensorType(buf, f.vstart, f.vend, v);
        break;
      }
      case 3: v.docString = readString(buf, f); break;
      default: (v.extra === NO_EXTRA ? v.extra = [] : v.extra).push(raw(buf, f));
    }
  }
  v.origin = origin(buf, start, end);
  return v;
}

const ATTR_TYPES: Record<number, AttributeValue['type']> = {
  1: 'FLOAT', 2: 'INT', 3: 'STRING', 4: 'TENSOR', 5: 'GRAPH', 6: 'FLOATS', 7: 'INTS', 8: 'STRINGS', 9: 'TENSORS', 10: 'GRAPHS',
};

const NO_BYTES = new Uint8Array(0);

export function decodeAttribute(buf: Buf, start: number, end: number, depth: number, kids?: KidRanges): Attribute {
  const f = fieldsOf(buf, start, end);
  let aname = '', docString = '', refAttrName = '', typeCode = 0;
  let f_ = 0, i_ = 0, s_: Uint8Array = NO_BYTES;
  let t_: Tensor | undefined, g_: Graph | undefined;
  // arrays only for the repeated fields present: most attributes hold one number or one list
  let floats: number[] | undefined, ints: number[] | undefined, strings: Uint8Array[] | undefined;
  let tensors: Tensor[] | undefined, graphs: Graph[] | undefined;
  let seen = 0; // bit i: field i+1 present (fields 2..11 decide the type of IR < 2 attributes)
  let extra: RawField[] | undefined;
  while (f.next()) {
    if (f.no <= 31) seen |= 1 << (f.no - 1);
    if (kids && f.no >= 5 && f.no <= 11 && f.no !== 7 && f.no !== 8 && f.no !== 9) {
      expectLen(f, 'attribute value');
      kids.push(f.no, f.vstart, f.vend);
      continue;
    }
    switch (f.no) {
      case 1: aname = name(buf, f); break;
      case 2: f_ = readFloat(buf, f); break;
      case 3: i_ = readInt(buf, f); break;
      case 4: expectLen(f, 'attribute s'); s_ = buf.subarray(f.vstart, f.vend); break;
      case 5: expectLen(f, 'attribute t'); t_ = decodeTensor(buf, f.vstart, f.vend); break;
      case 6: expectLen(f, 'attribute g'); g_ = decodeGraph(buf, f.vstart, f.vend, depth + 1); break;
      case 7: readPackedFixed32(buf, f, floats ??= [], true); break;
      case 8: readPackedVarints(buf, f, ints ??= []); break;
      case 9: expectLen(f, 'attribute strings'); (strings ??= []).push(buf.subarray(f.vstart, f.vend)); break;
      case 10: expectLen(f, 'attribute tensors'); (tensors ??= []).push(decodeTensor(buf, f.vstart, f.vend)); break;
      case 11: expectLen(f, 'attribute graphs'); (graphs ??= []).push(decodeGraph(buf, f.vstart, f.vend, depth + 1)); break;
      case 13: docString = readString(buf, f); break;
      case 20: typeCode = readInt(buf, f); break;
      case 21: refAttrName = readString(buf, f); break;
      default: (extra ??= []).push(raw(buf, f));
    }
  }
  // IR < 2 files may omit `type`: infer it from the field present.
  if (typeCode === 0) {
    const inferred: Array<[number, number]> = [[2, 1], [3, 2], [4, 3], [5, 4], [6, 5], [7, 6], [8, 7], [9, 8], [10, 9], [11, 10]];
    for (const [field, code] of inferred) if (seen & (1 << (field - 1))) { typeCode = code; break; }
  }
  let value: AttributeValue;
  switch (ATTR_TYPES[typeCode]) {
    case 'FLOAT': value = { type: 'FLOAT', f: f_ }; break;
    case 'INT': value = { type: 'INT', i: i_ }; break;
    case 'STRING': value = { type: 'STRING', s: s_ }; break;
    case 'TENSOR':
      if (!t_ && !kids) throw new PleatError('bad-model', `attribute '${aname}' is a TENSOR but holds no tensor`);
      value = { type: 'TENSOR', t: t_! }; break;
    case 'GRAPH':
      if (!g_ && !kids) throw new PleatError('bad-model', `attribute '${aname}' is a GRAPH but holds no graph`);
      value = { type: 'GRAPH', g: g_! }; break;
    case 'FLOATS': value = { type: 'FLOATS', floats: exact(floats) }; break;
    case 'INTS': value = { type: 'INTS', ints: exact(ints) }; break;
    case 'STRINGS': value = { type: 'STRINGS', strings: strings ?? [] }; break;
    case 'TENSORS': value = { type: 'TENSORS', tensors: tensors ?? [] }; break;
    case 'GRAPHS': value = { type: 'GRAPHS', graphs: graphs ?? [] }; break;
    default: value = { type: 'OTHER', code: typeCode };
  }
  return { name: aname, value, docString, refAttrName, extra: extra ?? NO_EXTRA, origin: origin(buf, start, end) };
}

export function decodeNode(buf: Buf, start: number, end: number, depth: number, kids?: KidRanges): Node {
  const f = fieldsOf(buf, start, end);
  const inBase = scratchIn.top, outBase = scratchOut.top;
  let attributes: Attribute[] | undefined, extra: RawField[] | undefined;
  let nname = '', opType = '', domain = '', docString = '';
  while (f.next()) {
    switch (f.no) {
      case 1: scratchIn.push(name(buf, f)); break;
      case 2: scratchOut.push(name(buf, f)); break;
      case 3: nname = name(buf, f); break;
      case 4: opType = name(buf, f); break;
      case 5:
        expectLen(f, 'attribute');
        if (kids) kids.push(5, f.vstart, f.vend);
        else (attributes ??= []).push(decodeAttribute(buf, f.vstart, f.vend, depth));
        break;
      case 6: docString = readString(buf, f); break;
      case 7: domain = name(buf, f); break;
      default: (extra ??= []).push(raw(buf, f));
    }
  }
  const sp = spansFor(buf);
  return new FileNode(nname, opType, domain, scratchIn.take(inBase), scratchOut.take(outBase),
    attributes === undefined ? NO_ATTRIBUTES : exact(attributes), docString, extra ?? NO_EXTRA, sp, sp.add(start, end, 0, 0));
}

/** How far ReaderNames looks ahead for an initializer's name among the node inputs. */
const READER_WINDOW = 16;

/**
 * The string a node already holds for an initializer's name. Exporters write the nodes first and the initializers
 * after, mostly in the order the nodes read them: by then the name cache has long dropped the node's string, so
 * each weight's name was held twice (10^5 more strings for a 10^5-node graph, and string compares of equal names
 * that could be one pointer). A cursor walks the node inputs in file order: the next few are compared, and a
 * match moves the cursor past it. Initializers in another order just keep their own string.
 */
class ReaderNames {
  private j = 0;
  private k = 0;
  constructor(private readonly nodes: readonly Node[]) {}

  /**
   * The name at buf[start, end): the string a node input already holds when the next few inputs have it (the cursor
   * then moves past it), else the name decoded. ASCII names are compared in their bytes, so a matched weight's name
   * is never decoded (10^5 strings made and dropped otherwise); other names are decoded and compared as strings,
   * since their bytes are not UTF-16 code units.
   */
  sameAt(buf: Buf, start: number, end: number): string {
    let ascii = true;
    for (let i = start; i < end; i++) if (buf[i]! >= 0x80) { ascii = false; break; }
    const text = ascii ? undefined : nameAt(buf, start, end);
    const len = end - start;
    const nodes = this.nodes;
    let j = this.j, k = this.k;
    for (let step = 0; step < READER_WINDOW && j < nodes.length; step++) {
      const ins = nodes[j]!.inputs;
      if (k >= ins.length) { j++; k = 0; continue; }
      const v = ins[k]!;
      if (text !== undefined ? v === text : v.length === len && sameAscii(v, buf, start)) {
        this.j = j; this.k = k + 1;
        return v;
      }
      k++;
    }
    return text ?? nameAt(buf, start, end);
  }
}

/** Whether `v` spells buf[start, start + v.length), all of it ASCII. */
function sameAscii(v: string, buf: Buf, start: number): boolean {
  for (let i = 0; i < v.length; i++) if (v.charCodeAt(i) !== buf[start + i]) return false;
  return true;
}

export function decodeGraph(buf: Buf, start: number, end: number, depth = 0, kids?: KidRanges): Graph {
  if (depth > 64) throw new PleatError('bad-model', 'subgraphs nested more than 64 deep');
  const f = fieldsOf(buf, start, end);
  const g: Graph = { name: '', nodes: [], initializers: [], inputs: [], outputs: [], valueInfo: [], docString: '', extra: [] };
  const readers = new ReaderNames(g.nodes);
  while (f.next()) {
    if (kids && (f.no === 1 || f.no === 5 || f.no >= 11 && f.no <= 13)) {
      expectLen(f, 'graph member');
      kids.push(f.no, f.vstart, f.vend);
      continue;
    }
    switch (f.no) {
      case 1: expectLen(f, 'node'); g.nodes.push(decodeNode(buf, f.vstart, f.vend, depth)); break;
      case 2: g.name = readString(buf, f); break;
      case 5: {
        expectLen(f, 'initializer');
        const t = decodeTensor(buf, f.vstart, f.vend, readers);
        g.initializers.push(t);
        break;
      }
      case 10: g.docString = readString(buf, f); break;
      case 11: expectLen(f, 'input'); g.inputs.push(decodeValueInfo(buf, f.vstart, f.vend)); break;
      case 12: expectLen(f, 'output'); g.outputs.push(decodeValueInfo(buf, f.vstart, f.vend)); break;
      case 13: expectLen(f, 'value_info'); g.valueInfo.push(decodeValueInfo(buf, f.vstart, f.vend)); break;
      case 15: // sparse_initializer: kept as it was read, and refused by parseModel
        if (f.wt === WT_LEN) sparseSeen.push(sparseName(buf, f.vstart, f.vend));
        g.extra.push(raw(buf, f));
        break;
      default: g.extra.push(raw(buf, f));
    }
  }
  g.origin = origin(buf, start, end);
  graphsRead?.push(g);
  return g;
}

/**
 * Mark initializers that are also graph inputs (defaults callers may replace), in every graph decodeModel read
 * (listed as they were decoded: a walk over every node's attributes to find the subgraphs cost more than the marking).
 */
function markOverridable(graphs: readonly Graph[], irVersion: number): void {
  if (irVersion < 4) return; // before IR 4 every initializer had to be listed as an input too: none is a default
  for (const g of graphs) {
    if (g.inputs.length === 0 || g.initializers.length === 0) continue;
    const isInput = memberOf(g.inputs.map((v) => v.name));
    const inits = g.initializers;
    for (let i = 0; i < inits.length; i++) if (isInput(inits[i]!.name)) inits[i]!.overridable = true;
  }
}

export function decodeOpset(buf: Buf, start: number, end: number): OpsetImport {
  const f = fieldsOf(buf, start, end);
  const o: OpsetImport = { domain: '', version: 0, extra: [] };
  while (f.next()) {
    if (f.no === 1) o.domain = readString(buf, f);
    else if (f.no === 2) o.version = readInt(buf, f);
    else o.extra.push(raw(buf, f));
  }
  o.origin = origin(buf, start, end);
  return o;
}

type ModelFields = Omit<Model, 'graph' | 'baseDir'> & { graph?: Graph };

/** A ModelProto's fields; with `kids`, the graph and opset imports are recorded as byte ranges, not decoded. */
export function decodeModelFields(buf: Buf, start: number, end: number, kids?: KidRanges): ModelFields {
  const f = fieldsOf(buf, start, end);
  let graph: Graph | undefined;
  const m: ModelFields = {
    irVersion: 0, opsets: [], producerName: '', producerVersion: '', domain: '', modelVersion: 0, docString: '',
    metadata: [], extra: [],
  };
  while (f.next()) {
    if (kids && (f.no === 7 || f.no === 8)) {
      expectLen(f, 'model member');
      kids.push(f.no, f.vstart, f.vend);
      continue;
    }
    switch (f.no) {
      case 1: m.irVersion = readInt(buf, f); break;
      case 2: m.producerName = readString(buf, f); break;
      case 3: m.producerVersion = readString(buf, f); break;
      case 4: m.domain = readString(buf, f); break;
      case 5: m.modelVersion = readInt(buf, f); break;
      case 6: m.docString = readString(buf, f); break;
      case 7: expectLen(f, 'graph'); graph = decodeGraph(buf, f.vstart, f.vend); break;
      case 8: expectLen(f, 'opset_import'); m.opsets.push(decodeOpset(buf, f.vstart, f.vend)); break;
      case 14: {
        expectLen(f, 'metadata_props');
        let k = '', v = '';
        for (const e = fieldsOf(buf, f.vstart, f.vend); e.next();) {
          if (e.no === 1) k = readString(buf, e);
          else if (e.no === 2) v = readString(buf, e);
        }
        m.metadata.push([k, v]);
        break;
      }
      default: m.extra.push(raw(buf, f));
    }
  }
  if (graph) m.graph = graph;
  return m;
}

/** Decode model bytes (no external data loaded; see parseModel). */
export function decodeModel(buf: Buf, baseDir: string): Model {
  scratchIn.top = 0; scratchOut.top = 0; scratchN.length = 0; // a read that threw may have left entries
  interner = new NameCache(buf);
  spans = new FileSpans(buf);
  externalSeen = 0;
  sparseSeen = [];
  dimsCache = new Array<readonly number[] | undefined>(DIMS_SLOTS);
  const graphs: Graph[] = graphsRead = [];
  let fields: ModelFields;
  try {
    fields = decodeModelFields(buf, 0, buf.byteLength);
  } finally {
    interner = undefined;
    spans = undefined;
    dimsCache = undefined;
    graphsRead = undefined;
  }
  const { graph, ...m } = fields;
  if (!graph) throw new PleatError('bad-model', 'no graph in the file: this is not an ONNX model');
  const model: Model = { ...m, graph, baseDir };
  markOverridable(graphs, model.irVersion);
  model.origin = origin(buf, 0, buf.byteLength);
  return model;
}

/** Decode a serialized TensorProto (e.g. an input_0.pb test-data file). */
export function parseTensor(bytes: Uint8Array): Tensor {
  try {
    return decodeTensor(bytes, 0, bytes.byteLength);
  } catch (e) {
    if (e instanceof WireError) throw new PleatError('bad-input', `not a serialized ONNX tensor: ${e.message}`);
    throw e;
  }
}

/**
 * Parse model bytes, load external data relative to baseDir, and check the graph's structure. Tensors are views
 * into `bytes` (no copies), so an edit made in place writes into them: pass a copy to keep the original.
 */
export function parseModel(bytes: Uint8Array, baseDir: string, label = 'model', redirect?: ReadonlyMap<string, string>, opts: ReadOptions = {}): Model {
  if (bytes.byteLength === 0) throw new PleatError('bad-model', `${label}: the file is empty`);
  let model: Model;
  try {
    model = decodeModel(bytes, baseDir);
  } catch (e) {
    if (e instanceof WireError) throw new PleatError('bad-model', `${label}: not a readable ONNX model (${e.message})`);
    if (e instanceof PleatError) throw new PleatError(e.kind, `${label}: ${e.message}`);
    throw e;
  }
  if (model.irVersion <= 0 || model.opsets.length === 0 && model.irVersion >= 3) {
    throw new PleatError('bad-model', `${label}: not an ONNX model (no IR version or opset import)`);
  }
  // ONNX IR: GraphProto.sparse_initializer holds weights in a sparse form; pleat has no reader for it, and a node
  // reading one would otherwise be refused as reading a value nothing defines (untrue)
  if (sparseSeen.length > 0) {
    const more = sparseSeen.length > 1 ? ` (and ${sparseSeen.length - 1} more)` : '';
    throw new PleatError('dtype-unsupported', `${label}: initializer '${sparseSeen[0]}'${more} is stored as a sparse tensor (sparse_initializer), which pleat cannot read; store it as a dense initializer`);
  }
  // (the walk over every tensor is skipped when the read met no external data: 10^5 tensors make it show)
  if (opts.externalData !== 'leave' && externalSeen > 0) loadExternalData(model, label, redirect);
  try {
    validateModel(model, { externalLoaded: opts.externalData !== 'leave' });
  } catch (e) {
    if (e instanceof PleatError) throw new PleatError(e.kind, `${label}: ${e.message}`);
    throw e;
  }
  return model;
}

/** `externalData: 'leave'` reads the structure only: external tensors keep no bytes (survey of a model whose side file is missing). */
export interface ReadOptions { externalData?: 'load' | 'leave' }

/**
 * Read a .onnx file. The file is read once and never written. `redirect` maps side-file paths (as the model names
 * them, resolved) to the files to read instead: a staged output is read back before its side files are renamed in.
 */
export function readModelFile(path: string, redirect?: ReadonlyMap<string, string>, opts: ReadOptions = {}): Model {
  if (path === '') throw new PleatError('bad-input', "'' (an empty path): no such file; give the model's path");
  let st;
  try {
    st = statSync(path);
  } catch (e) {
    throw new PleatError('bad-input', `${path}: ${(e as NodeJS.ErrnoException).code === 'ENOENT' ? 'no such file' : pathProblem(e)}`);
  }
  if (st.isDirectory()) throw new PleatError('bad-input', `${path}: is a directory, expected an .onnx file`);
  if (!st.isFile()) throw new PleatError('bad-input', `${path}: not a regular file (a FIFO, socket or device), expected an .onnx file`);
  let bytes: Uint8Array;
  let fd: number | undefined;
  try {
    fd = openForRead(path);
    bytes = readSparse(path, fd);
  } catch (e) {
    if (e instanceof PleatError) throw e;
    throw new PleatError('bad-input', `${path}: cannot be read (${(e as Error).message.split('\n')[0]})`);
  } finally {
    if (fd !== undefined) closeSync(fd);
  }
  const model = parseModel(bytes, dirname(resolve(path)), path, redirect, opts);
  model.sourcePath = resolve(path);
  return model;
}
