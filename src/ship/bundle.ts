// Weight bundles for device runtimes that load raw weights instead of ONNX files: the model's constant
// tensors as one safetensors file or as C source, plus manifest.json, which maps every layer (node) to its
// attributes, inputs, outputs and the tensors it reads. This room plans the files and their bytes; they are
// written through the output transaction (src/jobs/export.ts), staged, read back and renamed in together.
import { ensureLoaded } from '../onnx/sparse-read.js';
import { entryAt } from '../onnx/paths.js';
import { accessSync, closeSync, constants, lstatSync, openSync, writeSync } from 'node:fs';
import { basename, dirname, join, resolve, sep } from 'node:path';
import { DataType, elementCount, type Attribute, type DataTypeCode, type Graph, type Model, type Node, type Tensor, type ValueInfo } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import { bfloatBitsToNumber, bytesPerElement, dataTypeName, halfBitsToNumber } from '../graph/tensor.js';
import { layoutSafetensors, safetensorsDtype } from './safetensors.js';
import { cElementType, renderCSource } from './c-source.js';
import type { BundleTensor } from './bundle-tensor.js';
import type { BundleReadBack } from './read-back.js';

export type { BundleTensor, BundleReadBack };

export type BundleFormat = 'safetensors' | 'c';
export const BUNDLE_FORMATS: readonly BundleFormat[] = ['safetensors', 'c'];

export interface SkippedTensor {
  name: string;
  /**
   * `dtype-unsupported` (no safetensors/C form, e.g. strings), `in-subgraph` (an initializer or Constant of an
   * If/Loop/Scan body) or `sparse-value` (a Constant holding a sparse tensor: bundles hold dense tensors only).
   */
  reason: 'dtype-unsupported' | 'in-subgraph' | 'sparse-value';
  note: string;
}

export interface BundleResult {
  format: BundleFormat;
  dir: string;
  /** Paths of the files written, under `dir` as the caller gave it, manifest last. */
  files: string[];
  tensors: number;
  /** Bytes of tensor data in the bundle. */
  bytes: number;
  skipped: SkippedTensor[];
  /** The staged files read back from disk and compared with the checked model before they were renamed in. */
  readBack: BundleReadBack;
}

/** A bundle decided but not yet written (so not yet read back). */
export type PlannedBundle = Omit<BundleResult, 'readBack'>;

/** True when both bundle formats can hold the element type. */
export function bundleSupports(code: DataTypeCode): boolean {
  return safetensorsDtype(code) !== undefined && cElementType(code) !== undefined;
}

/**
 * The tensor's elements as little-endian bytes of its own element type, exactly (int64 through BigInt, float16
 * and bfloat16 as their bit patterns). Raw and external data are returned as views, not copies.
 */
export function tensorBytes(t: Tensor): Uint8Array {
  const bpe = bytesPerElement(t.dataType);
  if (bpe === undefined || !bundleSupports(t.dataType)) {
    throw new PleatError('dtype-unsupported', `tensor '${t.name}': ${dataTypeName(t.dataType)} has no bundle form`);
  }
  const n = elementCount(t.dims);
  const s = t.storage;
  const short = (have: number) => new PleatError('bad-input',
    `tensor '${t.name}' holds ${have} elements but its dims [${t.dims.join(',')}] need ${n}; the model is damaged`);
  switch (s.kind) {
    case 'raw': case 'external': {
      if (s.bytes.byteLength < n * bpe) {
        if (s.kind === 'external' && s.bytes.byteLength === 0 && n > 0) {
          throw new PleatError('bad-input', `tensor '${t.name}' is stored externally and its data was not loaded; read the model with readModelFile`);
        }
        throw short(Math.floor(s.bytes.byteLength / bpe));
      }
      ensureLoaded(s.bytes); // large payloads may still be on disk (src/onnx/sparse-read.ts)
      return s.bytes.subarray(0, n * bpe);
    }
    case 'empty':
      if (n > 0) throw short(0);
      return new Uint8Array(0);
    case 'string_data':
      throw new PleatError('dtype-unsupported', `tensor '${t.name}' holds strings, which have no bundle form`);
    default: break;
  }
  if (s.values.length < n) throw short(s.values.length);
  const out = new Uint8Array(n * bpe);
  const dv = new DataView(out.buffer);
  const code = t.dataType;
  switch (s.kind) {
    case 'float_data': for (let i = 0; i < n; i++) dv.setFloat32(i * 4, s.values[i]!, true); break;
    case 'double_data': for (let i = 0; i < n; i++) dv.setFloat64(i * 8, s.values[i]!, true); break;
    case 'int64_data': for (let i = 0; i < n; i++) dv.setBigInt64(i * 8, s.values[i]!, true); break;
    case 'uint64_data':
      // the ONNX spec keeps uint32 and uint64 elements in uint64_data
      if (code === DataType.UINT32) for (let i = 0; i < n; i++) dv.setUint32(i * 4, Number(s.values[i]! & 0xffffffffn), true);
      else for (let i = 0; i < n; i++) dv.setBigUint64(i * 8, s.values[i]!, true);
      break;
    case 'int32_data':
      // int32_data holds int32, int16, int8, uint16, uint8, bool, and float16/bfloat16 bit patterns
      for (let i = 0; i < n; i++) {
        const v = s.values[i]!;
        if (bpe === 4) dv.setInt32(i * 4, v, true);
        else if (bpe === 2) dv.setUint16(i * 2, v & 0xffff, true);
        else dv.setUint8(i, v & 0xff);
      }
      break;
  }
  return out;
}

function toBundleTensor(t: Tensor, name: string): BundleTensor {
  return {
    name, dims: [...t.dims], dataType: t.dataType, count: elementCount(t.dims),
    elementBytes: bytesPerElement(t.dataType)!, bytes: tensorBytes(t),
  };
}

const isConstantNode = (n: Node) => n.opType === 'Constant' && (n.domain === '' || n.domain === 'ai.onnx');

/**
 * Every constant of a subgraph (initializers, and Constant nodes in any value form), nested bodies included:
 * bundles hold the main graph's weights only, so each is listed as skipped rather than left out unsaid.
 */
function subgraphConstants(g: Graph, where: string, skipped: SkippedTensor[]): void {
  for (const t of g.initializers) skipped.push({ name: t.name, reason: 'in-subgraph', note: `initializer of a subgraph (${where}); bundles hold the main graph's weights` });
  for (const n of g.nodes) {
    if (isConstantNode(n) && n.outputs[0]) {
      skipped.push({ name: n.outputs[0], reason: 'in-subgraph', note: `Constant node '${n.name}' of a subgraph (${where}); bundles hold the main graph's weights` });
    }
    for (const a of n.attributes) {
      const graphs = a.value.type === 'GRAPH' ? [a.value.g] : a.value.type === 'GRAPHS' ? a.value.graphs : [];
      for (const sg of graphs) subgraphConstants(sg, `node '${n.name}' attribute '${a.name}'`, skipped);
    }
  }
}

interface Collected {
  tensors: BundleTensor[];
  skipped: SkippedTensor[];
  /** Node index -> name of the bundle tensor holding a Constant node's value. */
  constants: Map<number, string>;
}

/** The main graph's initializers and Constant values; what has no bundle form is listed as skipped. */
export function collectBundleTensors(model: Model): Collected {
  const g = model.graph;
  const tensors: BundleTensor[] = [];
  const skipped: SkippedTensor[] = [];
  const constants = new Map<number, string>();
  const seen = new Set<string>();
  const add = (t: Tensor, name: string): boolean => {
    if (!name) throw new PleatError('bad-input', 'the model has an initializer without a name; the model is damaged');
    if (seen.has(name)) throw new PleatError('bad-input', `tensor name '${name}' is defined twice in the main graph; the model is damaged`);
    seen.add(name);
    if (!bundleSupports(t.dataType)) {
      skipped.push({ name, reason: 'dtype-unsupported', note: `${dataTypeName(t.dataType)} has no safetensors or C form` });
      return false;
    }
    tensors.push(toBundleTensor(t, name));
    return true;
  };
  for (const t of g.initializers) add(t, t.name);
  g.nodes.forEach((n, i) => {
    const constant = isConstantNode(n);
    const value = constant ? n.attributes.find((a) => a.name === 'value' && a.value.type === 'TENSOR') : undefined;
    if (value && value.value.type === 'TENSOR' && n.outputs[0] && add(value.value.t, n.outputs[0])) constants.set(i, n.outputs[0]);
    // (the manifest shows only the attribute's type for a SparseTensorProto: its values are in no file)
    if (constant && n.outputs[0] && n.attributes.some((a) => a.name === 'sparse_value')) {
      skipped.push({ name: n.outputs[0], reason: 'sparse-value', note: `Constant node '${n.name}' holds a sparse tensor (sparse_value); bundles hold dense tensors only` });
    }
    for (const a of n.attributes) {
      const graphs = a.value.type === 'GRAPH' ? [a.value.g] : a.value.type === 'GRAPHS' ? a.value.graphs : [];
      for (const sg of graphs) subgraphConstants(sg, `node '${n.name}' attribute '${a.name}'`, skipped);
    }
  });
  return { tensors, skipped, constants };
}

// ---- manifest -------------------------------------------------------------------------------------

type Json = null | boolean | number | string | Json[] | { [k: string]: Json };

function num(v: number): Json {
  return Number.isFinite(v) ? v : String(v); // JSON has no NaN or Infinity: "NaN", "Infinity", "-Infinity"
}

/** A float32 value as the shortest decimal that reads back to the same float32 (0.001, not 0.0010000000474974513). */
function num32(v: number): Json {
  if (!Number.isFinite(v)) return String(v);
  for (let p = 1; p <= 9; p++) {
    const d = Number(v.toPrecision(p));
    if (Object.is(Math.fround(d), v)) return d; // (Object.is: -0 keeps its sign)
  }
  return v;
}

/** Elements as plain JSON numbers (int64 beyond 2^53 as decimal strings, so nothing is rounded). */
function plainValues(t: BundleTensor): Json[] {
  const dv = new DataView(t.bytes.buffer, t.bytes.byteOffset, t.bytes.byteLength);
  const out: Json[] = [];
  for (let i = 0; i < t.count; i++) {
    switch (t.dataType) {
      case DataType.FLOAT: out.push(num32(dv.getFloat32(i * 4, true))); break;
      case DataType.DOUBLE: out.push(num(dv.getFloat64(i * 8, true))); break;
      case DataType.FLOAT16: out.push(num(halfBitsToNumber(dv.getUint16(i * 2, true)))); break;
      case DataType.BFLOAT16: out.push(num(bfloatBitsToNumber(dv.getUint16(i * 2, true)))); break;
      case DataType.INT64: case DataType.UINT64: {
        const v = t.dataType === DataType.INT64 ? dv.getBigInt64(i * 8, true) : dv.getBigUint64(i * 8, true);
        out.push(v >= BigInt(Number.MIN_SAFE_INTEGER) && v <= BigInt(Number.MAX_SAFE_INTEGER) ? Number(v) : String(v));
        break;
      }
      case DataType.INT32: out.push(dv.getInt32(i * 4, true)); break;
      case DataType.UINT32: out.push(dv.getUint32(i * 4, true)); break;
      case DataType.INT16: out.push(dv.getInt16(i * 2, true)); break;
      case DataType.UINT16: out.push(dv.getUint16(i * 2, true)); break;
      case DataType.INT8: out.push(dv.getInt8(i)); break;
      default: out.push(dv.getUint8(i)); break; // uint8, bool
    }
  }
  return out;
}

const utf8 = new TextDecoder();

function inlineTensor(t: Tensor): Json {
  const head = { dtype: dataTypeName(t.dataType), shape: [...t.dims] };
  if (t.storage.kind === 'string_data') return { ...head, values: t.storage.values.map((v) => utf8.decode(v)) };
  if (!bundleSupports(t.dataType)) return { ...head, values: null };
  return { ...head, values: plainValues(toBundleTensor(t, t.name)) };
}

function attributeJson(a: Attribute, constantTensor: string | undefined): Json {
  const v = a.value;
  switch (v.type) {
    case 'FLOAT': return num32(v.f); // attribute floats are float32 in ONNX
    case 'INT': return v.i;
    case 'STRING': return utf8.decode(v.s);
    case 'FLOATS': return v.floats.map(num32);
    case 'INTS': return [...v.ints];
    case 'STRINGS': return v.strings.map((s) => utf8.decode(s));
    case 'TENSOR': return constantTensor !== undefined ? { tensor: constantTensor } : inlineTensor(v.t);
    case 'TENSORS': return v.tensors.map(inlineTensor);
    case 'GRAPH': return { graph: v.g.name, nodes: v.g.nodes.length };
    case 'GRAPHS': return v.graphs.map((g) => ({ graph: g.name, nodes: g.nodes.length }));
    case 'OTHER': return { attribute_type: v.code };
  }
}

function valueJson(v: ValueInfo, withDefault: Set<string>): Json {
  const out: { [k: string]: Json } = { name: v.name };
  if (v.elemType !== undefined) out.dtype = dataTypeName(v.elemType);
  if (v.shape) out.shape = v.shape.map((d) => d);
  if (withDefault.has(v.name)) out.has_default = true;
  return out;
}

/** A plain JSON value; -0 as -0.0, which JSON readers take for negative zero (JSON.stringify writes 0). */
const plainJson = (v: Json): string => (Object.is(v, -0) ? '-0.0' : JSON.stringify(v));

/** JSON with sorted object keys, two-space indentation, and short arrays of plain values on one line. */
export function stableJson(v: Json, indent = ''): string {
  if (Array.isArray(v)) {
    if (v.length === 0) return '[]';
    if (v.every((x) => x === null || typeof x !== 'object')) return `[${v.map(plainJson).join(', ')}]`;
    const next = indent + '  ';
    return `[\n${v.map((x) => next + stableJson(x, next)).join(',\n')}\n${indent}]`;
  }
  if (v !== null && typeof v === 'object') {
    const keys = Object.keys(v).sort((a, b) => (a < b ? -1 : a > b ? 1 : 0));
    if (keys.length === 0) return '{}';
    const next = indent + '  ';
    return `{\n${keys.map((k) => `${next}${JSON.stringify(k)}: ${stableJson(v[k]!, next)}`).join(',\n')}\n${indent}}`;
  }
  return plainJson(v);
}

/**
 * manifest.json (keys sorted, arrays in graph order):
 *   pleat_bundle: 1 (layout version); format; files (the weight files, manifest excluded)
 *   model: graph name, ir_version, opsets [{domain, version}], inputs/outputs [{name, dtype, shape, has_default?}]
 *   tensors: {name: {dtype, shape, count, bytes, file, overridable?, + data_offsets and safetensors_dtype, or
 *            symbol and c_type}}
 *   layers: [{index, name, op, domain?, attributes (plain JSON), inputs, outputs, tensors (bundle tensors it reads)}]
 *   skipped: [{name, reason, note}] for every constant not in the bundle (reasons: dtype-unsupported, in-subgraph,
 *            sparse-value)
 *   provenance: the model's pleat.* metadata_props (version, source SHA-256 and, for a source with external data,
 *               its side files' digest, check status, gate and seed) when
 *               it has them, so a bundle says whether the fold behind it was checked, as the folded .onnx does
 */
/** The model's pleat.* metadata_props (what pleat recorded of the fold that made it), as an object. */
function provenanceOfModel(model: Model): { [k: string]: string } {
  const out: { [k: string]: string } = {};
  for (const [k, v] of model.metadata) if (k.startsWith('pleat.')) out[k] = v;
  return out;
}

function manifest(model: Model, format: BundleFormat, files: string[], c: Collected, perTensor: Map<string, { [k: string]: Json }>): string {
  const g = model.graph;
  const inBundle = new Set(c.tensors.map((t) => t.name));
  const initNames = new Set(g.initializers.map((t) => t.name));
  // (no prototype: a tensor or attribute named __proto__ is a key like any other, not the object's prototype)
  const tensors: { [k: string]: Json } = Object.create(null);
  const graphInputs = new Set(g.inputs.map((v) => v.name));
  for (const t of c.tensors) {
    const entry: { [k: string]: Json } = { dtype: dataTypeName(t.dataType), shape: t.dims, count: t.count, bytes: t.bytes.byteLength, ...perTensor.get(t.name) };
    // a weight that is also a graph input is only a default: callers may replace it at run time
    if (graphInputs.has(t.name)) entry.overridable = true;
    tensors[t.name] = entry;
  }
  const layers: Json[] = g.nodes.map((n, i) => {
    const constant = c.constants.get(i);
    const reads: string[] = [];
    for (const name of n.inputs) if (name && inBundle.has(name) && !reads.includes(name)) reads.push(name);
    if (constant !== undefined) reads.push(constant);
    const attributes: { [k: string]: Json } = Object.create(null);
    for (const a of n.attributes) attributes[a.name] = attributeJson(a, a.name === 'value' ? constant : undefined);
    const layer: { [k: string]: Json } = {
      index: i, name: n.name, op: n.opType, attributes, inputs: [...n.inputs], outputs: [...n.outputs], tensors: reads,
    };
    if (n.domain && n.domain !== 'ai.onnx') layer.domain = n.domain;
    return layer;
  });
  const doc: Json = {
    pleat_bundle: 1,
    format,
    files,
    model: {
      graph: g.name,
      ir_version: model.irVersion,
      opsets: model.opsets.map((o) => ({ domain: o.domain, version: o.version })),
      inputs: g.inputs.map((v) => valueJson(v, initNames)),
      outputs: g.outputs.map((v) => valueJson(v, initNames)),
    },
    tensors,
    layers,
    skipped: c.skipped.map((s) => ({ name: s.name, reason: s.reason, note: s.note })),
  };
  const provenance = provenanceOfModel(model);
  if (Object.keys(provenance).length) doc.provenance = provenance;
  return stableJson(doc) + '\n';
}

// ---- writing --------------------------------------------------------------------------------------

export type Content = Iterable<Uint8Array | string>;

export function writeAll(path: string, content: Content): void {
  const fd = openSync(path, 'w');
  try {
    for (const piece of content) {
      const b = typeof piece === 'string' ? Buffer.from(piece, 'utf8') : piece;
      let done = 0;
      while (done < b.byteLength) done += writeSync(fd, b, done, b.byteLength - done);
    }
  } finally {
    closeSync(fd);
  }
}

/** The files each bundle format writes, manifest last. */
export const BUNDLE_FILES: Readonly<Record<BundleFormat, readonly string[]>> = {
  safetensors: ['weights.safetensors', 'manifest.json'],
  c: ['weights.h', 'weights.c', 'manifest.json'],
};

export function checkBundleFormat(format: BundleFormat): void {
  if (!BUNDLE_FORMATS.includes(format)) {
    throw new PleatError('bad-input', `--bundle-format '${String(format)}' is not known; choose ${BUNDLE_FORMATS.join(' or ')}`);
  }
}

/**
 * Check a bundle folder before any work: it is an existing folder, or a new name in an existing writable folder
 * (pleat creates the bundle folder itself, never the folders above it, as fold never creates -o's folder); and it
 * holds no file of the other format's bundle, which the new bundle would not replace and its manifest would not
 * list (another model's weights left beside it). Nothing is removed: the user empties the folder. The files
 * themselves are checked where they are claimed (OutputSet.reserve).
 */
export function checkBundleFolder(dir: string, format: BundleFormat): { full: string; exists: boolean } {
  checkBundleFormat(format);
  const full = resolve(dir);
  const label = `--bundle ${dir}`;
  const st = entryAt(full, label);
  if (st && !st.isDirectory()) throw new PleatError('bad-input', `${label}: exists and is not a folder; give --bundle a folder path`);
  if (!st) {
    const parent = dirname(full);
    const up = entryAt(parent, label);
    if (!up) throw new PleatError('bad-input', `${label}: the folder ${parent} does not exist (pleat creates the bundle folder, not the folders above it)`);
    if (!up.isDirectory()) throw new PleatError('bad-input', `${label}: ${parent} is not a folder`);
    try { accessSync(parent, constants.W_OK); } catch {
      throw new PleatError('bad-input', `${label}: cannot create the bundle folder in ${parent} (not writable)`);
    }
    return { full, exists: false };
  }
  const own = new Set(BUNDLE_FILES[format]);
  for (const name of new Set(Object.values(BUNDLE_FILES).flat())) {
    if (own.has(name) || !lstatSync(join(full, name), { throwIfNoEntry: false })) continue;
    throw new PleatError('bad-input', `${label}: holds ${name}, which a ${format} bundle does not write, so it would stay beside a manifest that does not list it; use an empty folder or remove ${name}`);
  }
  return { full, exists: true };
}

/** The result with the folder and files named as the caller gave the folder (reports print paths as given). */
export function asGiven<R extends PlannedBundle>(result: R, dir: string): R {
  const under = (name: string) => (dir.endsWith('/') || dir.endsWith(sep) ? `${dir}${name}` : `${dir}/${name}`);
  return { ...result, dir, files: result.files.map((f) => under(basename(f))) };
}

/** Decide a bundle's files and their contents for the folder `full` (an absolute path); nothing is written. */
export function planBundle(model: Model, full: string, format: BundleFormat): { files: Array<[string, Content]>; result: PlannedBundle } {
  checkBundleFormat(format);
  const collected = collectBundleTensors(model);
  const perTensor = new Map<string, { [k: string]: Json }>();
  const about = `graph '${model.graph.name}'${model.sourcePath ? ` from ${basename(model.sourcePath)}` : ''}`;
  let files: Array<[string, Content]>;
  if (format === 'safetensors') {
    const metadata: Record<string, string> = { producer: 'pleat', manifest: 'manifest.json', graph: model.graph.name, ...provenanceOfModel(model) };
    const layout = layoutSafetensors(collected.tensors, metadata);
    for (const o of layout.order) {
      perTensor.set(o.tensor.name, { file: 'weights.safetensors', data_offsets: [o.begin, o.end], safetensors_dtype: safetensorsDtype(o.tensor.dataType)! });
    }
    files = [['weights.safetensors', [layout.head, ...layout.order.map((o) => o.tensor.bytes)]]];
  } else {
    const c = renderCSource(collected.tensors, about);
    for (const t of collected.tensors) perTensor.set(t.name, { file: 'weights.c', symbol: c.symbols.get(t.name)!, c_type: cElementType(t.dataType)! });
    files = [['weights.h', [c.header]], ['weights.c', c.source]];
  }
  const names = files.map(([n]) => n);
  files.push(['manifest.json', [manifest(model, format, names, collected, perTensor)]]);
  return {
    files,
    result: {
      format, dir: full, files: files.map(([n]) => join(full, n)), tensors: collected.tensors.length,
      bytes: collected.tensors.reduce((a, t) => a + t.bytes.byteLength, 0), skipped: collected.skipped,
    },
  };
}
