// The bundle read back: after the bundle files are staged and before they are renamed in, every weight the staged
// manifest lists is read from the staged files on disk and compared, bit for bit, with the same tensor of the
// model that passed the check. The files are parsed here on their own terms (the safetensors container from its
// format description, the C arrays from their text), never through the writers' layout or literal code, so a
// defect in serialization (byte order, float16 bits, a literal, a tensor dropped, renamed or listed twice, offsets
// pointing at the wrong bytes) is an internal error (exit 3) instead of a bundle shipped with exit 0.
import { closeSync, fstatSync, openSync, readSync, writeSync } from 'node:fs';
import { DataType, elementCount, type Attribute, type Graph, type Model, type Node, type Tensor } from '../graph/ir.js';
import { dataTypeName } from '../graph/tensor.js';
import { ensureLoaded } from '../onnx/sparse-read.js';

/** What the read back compared; in the export report as `bundle.readBack`. */
export interface BundleReadBack {
  /** `passed`: every listed tensor matched; `skipped`: the bundle lists no tensor, so no weight was compared. */
  status: 'passed' | 'skipped';
  /** Tensors compared (every tensor the manifest lists). */
  tensors: number;
  /** Elements compared. */
  elements: number;
  /** Bytes of tensor data compared (the elements in their own type). */
  bytes: number;
  /** Bytes read from the staged files (weights and manifest; each read once). */
  fileBytes: number;
}

/** A staged bundle that does not hold the checked model's weights: a defect in pleat, never bad input. */
export class BundleMismatch extends Error {
  constructor(message: string) {
    super(`bundle read back: ${message}; nothing was written`);
    this.name = 'BundleMismatch';
  }
}

const fail = (message: string): never => { throw new BundleMismatch(message); };

// ---- what the checked model holds -----------------------------------------------------------------

/**
 * Element types a bundle carries, with their size, safetensors dtype and C element type. Written down here from
 * the formats, not taken from the writers: safetensors dtype names from the format's description (from memory:
 * F64, F32, F16, BF16, I64, I32, I16, I8, U64, U32, U16, U8, BOOL); C types as weights.h documents them.
 */
const CARRIED: Record<number, { size: number; st: string; c: string }> = {
  [DataType.DOUBLE]: { size: 8, st: 'F64', c: 'double' },
  [DataType.FLOAT]: { size: 4, st: 'F32', c: 'float' },
  [DataType.FLOAT16]: { size: 2, st: 'F16', c: 'uint16_t' },
  [DataType.BFLOAT16]: { size: 2, st: 'BF16', c: 'uint16_t' },
  [DataType.INT64]: { size: 8, st: 'I64', c: 'int64_t' },
  [DataType.INT32]: { size: 4, st: 'I32', c: 'int32_t' },
  [DataType.INT16]: { size: 2, st: 'I16', c: 'int16_t' },
  [DataType.INT8]: { size: 1, st: 'I8', c: 'int8_t' },
  [DataType.UINT64]: { size: 8, st: 'U64', c: 'uint64_t' },
  [DataType.UINT32]: { size: 4, st: 'U32', c: 'uint32_t' },
  [DataType.UINT16]: { size: 2, st: 'U16', c: 'uint16_t' },
  [DataType.UINT8]: { size: 1, st: 'U8', c: 'uint8_t' },
  [DataType.BOOL]: { size: 1, st: 'BOOL', c: 'uint8_t' },
};

const isConstant = (n: Node) => n.opType === 'Constant' && (n.domain === '' || n.domain === 'ai.onnx');

interface Constants {
  /** Main-graph initializers and Constant `value` tensors, by name. */
  tensors: Map<string, Tensor>;
  /** Constant nodes of the main graph whose value is another attribute (value_float, ...), by output name. */
  inline: Map<string, { index: number; attribute: Attribute }>;
  /** "name\0reason" for every constant a bundle leaves out, counted (subgraph bodies can reuse names). */
  skipped: Map<string, number>;
}

function count(m: Map<string, number>, key: string): void {
  m.set(key, (m.get(key) ?? 0) + 1);
}

function bodies(n: Node): Graph[] {
  return n.attributes.flatMap((a) => (a.value.type === 'GRAPH' ? [a.value.g] : a.value.type === 'GRAPHS' ? a.value.graphs : []));
}

function subgraphConstants(g: Graph, skipped: Map<string, number>): void {
  for (const t of g.initializers) count(skipped, `${t.name}\0in-subgraph`);
  for (const n of g.nodes) {
    if (isConstant(n) && n.outputs[0]) count(skipped, `${n.outputs[0]}\0in-subgraph`);
    for (const b of bodies(n)) subgraphConstants(b, skipped);
  }
}

/** Every constant of the model, sorted by where a bundle must account for it (the README's `skipped` rules). */
function constantsOf(model: Model): Constants {
  const out: Constants = { tensors: new Map(), inline: new Map(), skipped: new Map() };
  const main = (t: Tensor, name: string) => {
    if (CARRIED[t.dataType] && t.storage.kind !== 'string_data') out.tensors.set(name, t);
    else count(out.skipped, `${name}\0dtype-unsupported`);
  };
  for (const t of model.graph.initializers) main(t, t.name);
  model.graph.nodes.forEach((n, index) => {
    const name = n.outputs[0];
    if (isConstant(n) && name) {
      const value = n.attributes.find((a) => a.name === 'value');
      if (value?.value.type === 'TENSOR') main(value.value.t, name);
      else if (n.attributes.some((a) => a.name === 'sparse_value')) count(out.skipped, `${name}\0sparse-value`);
      else if (n.attributes[0]) out.inline.set(name, { index, attribute: n.attributes[0] });
    }
    for (const b of bodies(n)) subgraphConstants(b, out.skipped);
  });
  return out;
}

/**
 * The tensor's elements as little-endian bytes of its own type, from its storage form (ONNX TensorProto: raw_data
 * little-endian; int32_data holds the narrower integers, bool and the 16-bit float bit patterns; uint64_data holds
 * uint32 and uint64). Raw and external data are views of the model's bytes.
 */
function modelBytes(t: Tensor, size: number): Uint8Array {
  const n = elementCount(t.dims);
  const s = t.storage;
  if (s.kind === 'raw' || s.kind === 'external') {
    ensureLoaded(s.bytes);
    return s.bytes.subarray(0, n * size);
  }
  const out = new Uint8Array(n * size);
  const dv = new DataView(out.buffer);
  if (s.kind === 'empty' || s.kind === 'string_data') return out.subarray(0, 0);
  const m = Math.min(n, s.values.length);
  for (let i = 0; i < m; i++) {
    const v = s.values[i]!;
    if (typeof v === 'bigint') {
      if (size === 8) dv.setBigUint64(i * 8, BigInt.asUintN(64, v), true);
      else dv.setUint32(i * 4, Number(BigInt.asUintN(32, v)), true);
    } else if (s.kind === 'float_data') dv.setFloat32(i * 4, v, true);
    else if (s.kind === 'double_data') dv.setFloat64(i * 8, v, true);
    else if (size === 4) dv.setInt32(i * 4, v, true);
    else if (size === 2) dv.setUint16(i * 2, v & 0xffff, true);
    else dv.setUint8(i, v & 0xff);
  }
  return m < n ? out.subarray(0, m * size) : out;
}

// ---- files ------------------------------------------------------------------------------------------

/** Reads a staged file front to back, counting what it read. */
class FileReader {
  readonly fd: number;
  readonly size: number;
  constructor(readonly label: string, path: string, private readonly tally: { bytes: number }) {
    this.fd = openSync(path, 'r');
    this.size = fstatSync(this.fd).size;
  }
  /** Exactly `length` bytes at `position` into `into` (at `at`). */
  read(into: Uint8Array, position: number, length: number, at = 0): Uint8Array {
    let done = 0;
    while (done < length) {
      const got = readSync(this.fd, into, at + done, length - done, position + done);
      if (got === 0) fail(`${this.label} ends at byte ${position + done}, before the ${length} bytes expected at ${position}`);
      done += got;
    }
    this.tally.bytes += length;
    return into.subarray(at, at + length);
  }
  close(): void { closeSync(this.fd); }
}

function readWhole(label: string, path: string, tally: { bytes: number }): Uint8Array {
  const f = new FileReader(label, path, tally);
  try { return f.read(new Uint8Array(f.size), 0, f.size); } finally { f.close(); }
}

const utf8 = new TextDecoder('utf-8', { fatal: true });

function text(label: string, bytes: Uint8Array): string {
  try { return utf8.decode(bytes); } catch { return fail(`${label} is not valid UTF-8`); }
}

/**
 * The first object key that appears twice in one object of a JSON text (JSON.parse keeps the last silently, so a
 * tensor listed twice would go unseen), or undefined. Assumes the text parses.
 */
export function duplicateKey(json: string): string | undefined {
  const stack: Array<Set<string> | null> = [];
  let expectKey = false;
  for (let i = 0; i < json.length; i++) {
    const c = json[i]!;
    if (c === '"') {
      let j = i + 1;
      while (json[j] !== '"') j += json[j] === '\\' ? 2 : 1;
      const top = stack[stack.length - 1];
      if (top && expectKey) {
        const key = JSON.parse(json.slice(i, j + 1)) as string;
        if (top.has(key)) return key;
        top.add(key);
        expectKey = false;
      }
      i = j;
    } else if (c === '{') { stack.push(new Set()); expectKey = true; }
    else if (c === '[') { stack.push(null); }
    else if (c === '}' || c === ']') { stack.pop(); }
    else if (c === ',') { expectKey = stack[stack.length - 1] !== null; }
  }
  return undefined;
}

function parseJson(label: string, raw: string): Record<string, unknown> {
  let v: unknown;
  try { v = JSON.parse(raw); } catch (e) { return fail(`${label} is not valid JSON (${(e as Error).message})`); }
  if (v === null || typeof v !== 'object' || Array.isArray(v)) fail(`${label} is not a JSON object`);
  const twice = duplicateKey(raw);
  if (twice !== undefined) fail(`${label} lists ${JSON.stringify(twice)} twice`);
  return v as Record<string, unknown>;
}

const sameList = (a: unknown, b: readonly unknown[]) => Array.isArray(a) && a.length === b.length && a.every((x, i) => x === b[i]);

// ---- the manifest -----------------------------------------------------------------------------------

interface ManifestTensor {
  name: string;
  tensor: Tensor;
  size: number;
  count: number;
  entry: Record<string, unknown>;
}

/**
 * The manifest's listing against the model: every listed tensor is a constant of the model with its dtype, shape,
 * count and byte length; every constant the bundle can carry is listed; `skipped` names every other constant with
 * its reason and nothing else; a Constant whose value is an attribute of another kind carries it in its layer.
 */
function checkManifest(model: Model, manifest: Record<string, unknown>, format: string, files: readonly string[]): ManifestTensor[] {
  if (manifest.format !== format) fail(`manifest.json says format ${JSON.stringify(manifest.format)}, not ${format}`);
  if (!sameList(manifest.files, files)) fail(`manifest.json lists the files ${JSON.stringify(manifest.files)}, not ${JSON.stringify(files)}`);
  const listed = manifest.tensors;
  if (listed === null || typeof listed !== 'object' || Array.isArray(listed)) return fail('manifest.json has no tensors object');
  const c = constantsOf(model);
  const out: ManifestTensor[] = [];
  for (const [name, e] of Object.entries(listed as Record<string, Record<string, unknown>>)) {
    const t = c.tensors.get(name) ?? fail(`manifest.json lists tensor '${name}', which is no weight of the checked model`);
    const size = CARRIED[t.dataType]!.size;
    const n = elementCount(t.dims);
    if (e.dtype !== dataTypeName(t.dataType)) fail(`tensor '${name}': manifest.json says dtype ${JSON.stringify(e.dtype)}, the checked model ${dataTypeName(t.dataType)}`);
    if (!sameList(e.shape, t.dims)) fail(`tensor '${name}': manifest.json says shape ${JSON.stringify(e.shape)}, the checked model [${t.dims.join(',')}]`);
    if (e.count !== n || e.bytes !== n * size) fail(`tensor '${name}': manifest.json says ${String(e.count)} elements in ${String(e.bytes)} bytes, the checked model ${n} in ${n * size}`);
    out.push({ name, tensor: t, size, count: n, entry: e });
  }
  for (const name of c.tensors.keys()) {
    if (!Object.hasOwn(listed, name)) fail(`tensor '${name}' of the checked model is not in the bundle and not listed as skipped`);
  }
  const skipped = new Map<string, number>();
  if (!Array.isArray(manifest.skipped)) fail('manifest.json has no skipped list');
  for (const s of manifest.skipped as Array<Record<string, unknown>>) count(skipped, `${String(s.name)}\0${String(s.reason)}`);
  for (const key of new Set([...c.skipped.keys(), ...skipped.keys()])) {
    if (c.skipped.get(key) !== skipped.get(key)) {
      const [name, reason] = key.split('\0');
      fail(`manifest.json lists '${name}' as skipped (${reason}) ${skipped.get(key) ?? 0} times where the checked model has ${c.skipped.get(key) ?? 0} such constants`);
    }
  }
  const layers = Array.isArray(manifest.layers) ? manifest.layers as Array<Record<string, unknown>> : [];
  for (const [name, { index, attribute }] of c.inline) {
    const attrs = layers[index]?.attributes as Record<string, unknown> | undefined;
    if (layers[index]?.index !== index || !attrs || !Object.hasOwn(attrs, attribute.name)) {
      fail(`Constant '${name}' (its ${attribute.name}) is neither a bundle tensor, nor skipped, nor carried by its layer in manifest.json`);
    }
    const differ = inlineDiffers(attribute, attrs![attribute.name]);
    if (differ) fail(`Constant '${name}': its ${attribute.name} ${differ}`);
  }
  return out.sort((a, b) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
}

/**
 * How a Constant's plain attribute in manifest.json differs from the checked model's, or undefined when it holds
 * the same value: floats are float32 (ONNX attributes), so a JSON number stands for the float32 it rounds to,
 * bit for bit (-0 included); a non-finite one is the string "NaN", "Infinity" or "-Infinity" (no NaN payload, as
 * JSON has none); integers as numbers, strings as their UTF-8 text.
 */
function inlineDiffers(a: Attribute, got: unknown): string | undefined {
  const float = (want: number, g: unknown): boolean => {
    if (typeof g === 'string') return Number.isNaN(want) ? g === 'NaN' : g === String(want) && !Number.isFinite(want);
    return typeof g === 'number' && Object.is(Math.fround(g), Math.fround(want));
  };
  const text = (want: Uint8Array, g: unknown) => g === new TextDecoder().decode(want);
  const list = <T>(want: readonly T[], same: (w: T, g: unknown) => boolean) => (Array.isArray(got) && got.length === want.length
    ? want.findIndex((w, i) => !same(w, got[i]))
    : -2);
  const shown = (x: number) => (Object.is(x, -0) ? '-0' : String(x));
  const v = a.value;
  let at: number;
  switch (v.type) {
    case 'FLOAT': return float(v.f, got) ? undefined : `is ${JSON.stringify(got)} where the checked model has ${shown(Math.fround(v.f))}`;
    case 'INT': return got === v.i ? undefined : `is ${JSON.stringify(got)} where the checked model has ${v.i}`;
    case 'STRING': return text(v.s, got) ? undefined : `is ${JSON.stringify(got)}, not the checked model's`;
    case 'FLOATS': at = list(v.floats, float); break;
    case 'INTS': at = list(v.ints, (w, g) => g === w); break;
    case 'STRINGS': at = list(v.strings, text); break;
    default: return undefined; // (no value a Constant carries as a weight)
  }
  if (at === -1) return undefined;
  if (at === -2) return `is ${JSON.stringify(got)}, not a list of the checked model's ${(v.type === 'FLOATS' ? v.floats : v.type === 'INTS' ? v.ints : v.strings).length} values`;
  return `element ${at} is ${JSON.stringify((got as unknown[])[at])} where the checked model has ${v.type === 'FLOATS' ? shown(Math.fround(v.floats[at]!)) : v.type === 'INTS' ? v.ints[at] : 'another string'}`;
}

/**
 * How a bundle's record of the checked model's provenance (its pleat.* metadata_props, README: what pleat recorded
 * of the fold that made it) differs from the model's, or undefined when it holds exactly those entries.
 */
function provenanceDiffers(want: ReadonlyMap<string, string>, got: unknown): string | undefined {
  if (got === undefined && want.size === 0) return undefined; // (a model pleat did not fold records none)
  if (got === null || typeof got !== 'object' || Array.isArray(got)) return `is ${JSON.stringify(got)}, not an object of the checked model's ${want.size} entries`;
  const entries = got as Record<string, unknown>;
  for (const [k, v] of want) {
    if (!Object.hasOwn(entries, k)) return `has no ${k}, which the checked model records as ${JSON.stringify(v)}`;
    if (entries[k] !== v) return `says ${k} is ${JSON.stringify(entries[k])} where the checked model records ${JSON.stringify(v)}`;
  }
  const extra = Object.keys(entries).find((k) => !want.has(k));
  return extra === undefined ? undefined : `has ${extra}, which the checked model does not record`;
}

// ---- comparing elements -----------------------------------------------------------------------------

function hexBits(bytes: Uint8Array, at: number, size: number): string {
  let s = '';
  for (let k = size - 1; k >= 0; k--) s += bytes[at + k]!.toString(16).padStart(2, '0');
  return `0x${s}`;
}

/** Row-major index of element i in a shape, as "[a, b, c]". */
function indexIn(dims: readonly number[], i: number): string {
  const idx: number[] = [];
  for (let d = dims.length - 1; d >= 0; d--) { idx.unshift(i % dims[d]!); i = Math.floor(i / dims[d]!); }
  return `[${idx.join(', ')}]`;
}

function differs(t: ManifestTensor, i: number, file: string, found: string, want: string): never {
  return fail(`tensor '${t.name}' element ${i} ${indexIn(t.tensor.dims, i)} is ${found} in ${file} where the checked model has ${want}`);
}

// ---- safetensors ------------------------------------------------------------------------------------

const CHUNK = 4 << 20;

/**
 * Parse the staged weights.safetensors on its own terms and compare its data with the model. The container, from
 * the safetensors format description (from memory): 8 bytes, N as an unsigned little-endian 64-bit integer; N bytes
 * of UTF-8 JSON, starting with '{' and possibly padded at the end with spaces, mapping each tensor name to
 * {dtype, shape, data_offsets: [begin, end)} (offsets relative to the byte after the header) plus an optional
 * "__metadata__" map of strings; then the data buffer, which the tensors cover with no gap or overlap.
 */
function readBackSafetensors(path: string, listed: ManifestTensor[], provenance: ReadonlyMap<string, string>, tally: { bytes: number }): void {
  const file = 'weights.safetensors';
  const f = new FileReader(file, path, tally);
  try {
    if (f.size < 8) fail(`${file} is ${f.size} bytes long, shorter than its length prefix`);
    const n = new DataView(f.read(new Uint8Array(8), 0, 8).slice().buffer).getBigUint64(0, true);
    if (n > BigInt(f.size - 8)) fail(`${file}: its header length ${n} runs past the end of the file (${f.size} bytes)`);
    const headerLength = Number(n);
    const raw = text(`${file}'s header`, f.read(new Uint8Array(headerLength), 8, headerLength));
    if (raw[0] !== '{') fail(`${file}'s header does not start with '{'`);
    const header = parseJson(`${file}'s header`, raw);
    const dataStart = 8 + headerLength;
    const dataLength = f.size - dataStart;
    const spans: Array<[number, number, string]> = [];
    const entries = new Map<string, { dtype: unknown; shape: unknown; begin: number; end: number }>();
    for (const [name, v] of Object.entries(header)) {
      if (name === '__metadata__') {
        const meta = v !== null && typeof v === 'object' && !Array.isArray(v) ? v as Record<string, unknown> : {};
        const ours = Object.fromEntries(Object.entries(meta).filter(([k]) => k.startsWith('pleat.')));
        const differ = provenanceDiffers(provenance, ours);
        if (differ) fail(`${file}'s metadata ${differ}`);
        continue;
      }
      const e = v as Record<string, unknown>;
      const off = e?.data_offsets as number[];
      if (!Array.isArray(off) || off.length !== 2 || !off.every((x) => Number.isSafeInteger(x) && x >= 0) || off[0] > off[1] || off[1] > dataLength) {
        fail(`${file}: tensor '${name}' has data_offsets ${JSON.stringify(off)}, outside its data buffer of ${dataLength} bytes`);
      }
      entries.set(name, { dtype: e.dtype, shape: e.shape, begin: off[0], end: off[1] });
      spans.push([off[0], off[1], name]);
    }
    // the tensors cover the data buffer exactly, in some order
    spans.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
    let at = 0;
    for (const [b, e, name] of spans) {
      if (b !== at) fail(`${file}: tensor '${name}' starts at byte ${b} of the data buffer where ${b > at ? 'a gap' : 'an overlap'} begins at ${at}`);
      at = e;
    }
    if (at !== dataLength) fail(`${file}: its tensors end at byte ${at} of a data buffer of ${dataLength} bytes`);
    const names = new Set(listed.map((t) => t.name));
    for (const name of entries.keys()) {
      if (!names.has(name)) fail(`${file} holds tensor '${name}', which manifest.json does not list`);
    }
    // compare in the file's order, so the data is read once, front to back
    const order = listed.map((t) => {
      const e = entries.get(t.name) ?? fail(`tensor '${t.name}' is listed in manifest.json but not in ${file}`);
      const want = CARRIED[t.tensor.dataType]!.st;
      if (e.dtype !== want) fail(`tensor '${t.name}': ${file} says dtype ${JSON.stringify(e.dtype)}, the checked model's ${dataTypeName(t.tensor.dataType)} is ${want}`);
      if (!sameList(e.shape, t.tensor.dims)) fail(`tensor '${t.name}': ${file} says shape ${JSON.stringify(e.shape)}, the checked model [${t.tensor.dims.join(',')}]`);
      if (e.end - e.begin !== t.count * t.size) fail(`tensor '${t.name}': ${file} gives it ${e.end - e.begin} bytes, the checked model ${t.count * t.size}`);
      if (t.entry.file !== file || t.entry.safetensors_dtype !== want || !sameList(t.entry.data_offsets, [e.begin, e.end])) {
        fail(`tensor '${t.name}': manifest.json places it at ${JSON.stringify(t.entry.file)} ${JSON.stringify(t.entry.data_offsets)} (${JSON.stringify(t.entry.safetensors_dtype)}), ${file} at [${e.begin},${e.end}] (${String(e.dtype)})`);
      }
      return { t, begin: e.begin };
    }).sort((a, b) => a.begin - b.begin);
    const buf = new Uint8Array(CHUNK);
    for (const { t, begin } of order) {
      const want = modelBytes(t.tensor, t.size);
      if (want.byteLength !== t.count * t.size) fail(`tensor '${t.name}': the checked model holds ${want.byteLength / t.size} of its ${t.count} elements`);
      for (let done = 0; done < want.byteLength;) {
        const len = Math.min(CHUNK, want.byteLength - done);
        const got = f.read(buf, dataStart + begin + done, len);
        if (!Buffer.from(got.buffer, got.byteOffset, len).equals(Buffer.from(want.buffer, want.byteOffset + done, len))) {
          let k = 0;
          while (got[k] === want[done + k]) k++;
          const i = Math.floor((done + k) / t.size);
          const local = i * t.size - done;
          differs(t, i, file, hexBits(got, local, t.size), hexBits(want, i * t.size, t.size));
        }
        done += len;
      }
    }
  } finally {
    f.close();
  }
}

// ---- C source ---------------------------------------------------------------------------------------

/**
 * Bits of M * 2^k in a binary floating-point format with p significand bits and exponents emin..emax, when that
 * value is exactly representable (as C99 hexadecimal literals denote: ISO C 6.4.4.2); undefined otherwise.
 * Magnitude only; M > 0.
 */
function exactBits(M: bigint, k: number, p: number, emin: number, emax: number): bigint | undefined {
  const L = M.toString(2).length;
  const E = k + L - 1;
  if (E > emax) return undefined;
  const fit = (shift: number): bigint | undefined => { // M * 2^shift, when an integer
    if (shift >= 0) return M << BigInt(shift);
    const s = BigInt(-shift);
    return M & ((1n << s) - 1n) ? undefined : M >> s;
  };
  if (E >= emin) {
    const f = fit(p - L);
    return f === undefined ? undefined : (BigInt(E - emin + 1) << BigInt(p - 1)) | (f - (1n << BigInt(p - 1)));
  }
  return fit(k - (emin - p + 1)); // subnormal: units of 2^(emin - p + 1)
}

/**
 * A C floating literal as the generator may write it (NAN, [-]INFINITY, [-]0.0[f], [-]0xH[.HHH]p[+-]D[f]) to its
 * bits in the format (32 or 64 bits), 'nan' for NAN, or undefined when it is none of these or not exact.
 */
function floatLiteralBits(tok: string, wide: boolean): bigint | 'nan' | undefined {
  const neg = tok.startsWith('-');
  const body = neg ? tok.slice(1) : tok;
  const sign = neg ? 1n << (wide ? 63n : 31n) : 0n;
  if (body === 'NAN') return neg ? undefined : 'nan';
  if (body === 'INFINITY') return sign | (wide ? 0x7ffn << 52n : 0xffn << 23n);
  const suffix = wide ? '' : 'f';
  if (body === `0.0${suffix}`) return sign;
  const m = new RegExp(`^0x([0-9a-f])(?:\\.([0-9a-f]+))?p([+-]?\\d+)${suffix}$`).exec(body);
  if (!m) return undefined;
  const digits = m[1]! + (m[2] ?? '');
  const M = BigInt(`0x${digits}`);
  if (M === 0n) return sign;
  const bits = wide ? exactBits(M, Number(m[3]) - 4 * (digits.length - 1), 53, -1022, 1023)
    : exactBits(M, Number(m[3]) - 4 * (digits.length - 1), 24, -126, 127);
  return bits === undefined ? undefined : sign | bits;
}

/** A C integer literal as the generator may write it, or undefined. */
function intLiteral(tok: string): bigint | undefined {
  let m: RegExpExecArray | null;
  if ((m = /^(-?)(0x[0-9a-f]+|\d+)u?$/.exec(tok))) return (m[1] ? -1n : 1n) * BigInt(m[2]!);
  if ((m = /^\((-?)(\d+) - 1\)$/.exec(tok))) return (m[1] ? -1n : 1n) * BigInt(m[2]!) - 1n;
  if ((m = /^(?:U?INT64_C)\((\d+)\)$/.exec(tok))) return BigInt(m[1]!);
  if ((m = /^\(-INT64_C\((\d+)\)\)$/.exec(tok))) return -BigInt(m[1]!);
  if ((m = /^\(-INT64_C\((\d+)\) - 1\)$/.exec(tok))) return -BigInt(m[1]!) - 1n;
  return undefined;
}

const INT_RANGE: Record<string, [bigint, bigint]> = {
  int8_t: [-(2n ** 7n), 2n ** 7n - 1n], int16_t: [-(2n ** 15n), 2n ** 15n - 1n], int32_t: [-(2n ** 31n), 2n ** 31n - 1n],
  int64_t: [-(2n ** 63n), 2n ** 63n - 1n], uint8_t: [0n, 255n], uint16_t: [0n, 65535n], uint32_t: [0n, 2n ** 32n - 1n], uint64_t: [0n, 2n ** 64n - 1n],
};

/** The model's element i as an unsigned integer of its size (its bits). */
function elementBits(bytes: Uint8Array, i: number, size: number): bigint {
  let v = 0n;
  for (let k = size - 1; k >= 0; k--) v = (v << 8n) | BigInt(bytes[i * size + k]!);
  return v;
}

/** Whether bits of that size are a NaN (exponent all ones, significand not zero). */
function isNaNBits(v: bigint, size: number): boolean {
  const frac = size === 8 ? 52n : 23n;
  const expMask = size === 8 ? 0x7ffn : 0xffn;
  return ((v >> frac) & expMask) === expMask && (v & ((1n << frac) - 1n)) !== 0n;
}

const latin1 = (b: Uint8Array, s: number, e: number) => Buffer.from(b.buffer, b.byteOffset + s, e - s).toString('latin1');

function hexDigit(c: number): number {
  if (c >= 0x30 && c <= 0x39) return c - 0x30;
  if (c >= 0x61 && c <= 0x66) return c - 0x57;
  return -1;
}

/**
 * Bits of a float32 literal [-]0xH[.HHH]p[+-]D f read from bytes b[s, e) (the form nearly every element takes),
 * when it is that form and exact; undefined sends it to the general path. Same rule as exactBits, in doubles:
 * the significand M stays below 2^53, so every step is exact.
 */
function hexFloat32At(b: Uint8Array, s: number, e: number): number | undefined {
  let p = s;
  const neg = b[p] === 0x2d;
  if (neg) p++;
  if (b[p] !== 0x30 || b[p + 1] !== 0x78) return undefined;
  p += 2;
  let M = hexDigit(b[p]!);
  if (M < 0) return undefined;
  p++;
  let nf = 0;
  if (b[p] === 0x2e) {
    for (p++; ; p++, nf++) {
      const d = hexDigit(b[p]!);
      if (d < 0) break;
      if (nf === 12) return undefined;
      M = M * 16 + d;
    }
    if (nf === 0) return undefined;
  }
  if (b[p] !== 0x70) return undefined;
  p++;
  const eneg = b[p] === 0x2d;
  if (eneg || b[p] === 0x2b) p++;
  let x = 0;
  const digits = p;
  for (; b[p]! >= 0x30 && b[p]! <= 0x39 && p - digits < 6; p++) x = x * 10 + b[p]! - 0x30;
  if (p === digits || b[p] !== 0x66 || p + 1 !== e) return undefined;
  if (M === 0) return neg ? 0x80000000 : 0;
  const k = (eneg ? -x : x) - 4 * nf;
  if (M <= 0x7fffffff) return smallSignificand(M, k, neg);
  const L = M < 2 ** 32 ? 32 - Math.clz32(M) : 64 - Math.clz32(Math.floor(M / 2 ** 32));
  const E = k + L - 1;
  if (E > 127) return undefined;
  let bits: number;
  if (E >= -126) {
    const shift = L - 24;
    let f: number;
    if (shift > 0) { const d = 2 ** shift; if (M % d) return undefined; f = M / d; } else f = M * 2 ** -shift;
    bits = (E + 127) * 2 ** 23 + (f - 2 ** 23);
  } else {
    const shift = k + 149;
    if (shift >= 0) bits = M * 2 ** shift;
    else { const d = 2 ** -shift; if (M % d) return undefined; bits = M / d; }
  }
  return neg ? bits + 0x80000000 : bits;
}

/**
 * hexFloat32At's rule for a significand below 2^31 (every literal the generator writes: at most 7 hex digits), in
 * 32-bit integer steps, which are several times faster than the same steps on doubles.
 */
function smallSignificand(M: number, k: number, neg: boolean): number | undefined {
  const L = 32 - Math.clz32(M);
  const E = k + L - 1;
  if (E > 127) return undefined;
  let bits: number;
  if (E >= -126) {
    const shift = L - 24;
    let f: number;
    if (shift > 0) { if (M & ((1 << shift) - 1)) return undefined; f = M >>> shift; } else f = M << -shift;
    bits = ((E + 127) << 23) | (f & 0x7fffff); // f is 1.fraction in [2^23, 2^24)
  } else {
    const shift = k + 149; // subnormal: units of 2^-149; M * 2^shift is below 2^23 here
    if (shift >= 0) bits = M << shift;
    else { if (-shift > 30 || M & ((1 << -shift) - 1)) return undefined; bits = M >>> -shift; }
  }
  return neg ? (bits | 0x80000000) >>> 0 : bits;
}

/** A plain integer literal [-](0xHHHH|DDD)[u] from bytes b[s, e), below 2^48, or undefined. */
function plainIntAt(b: Uint8Array, s: number, e: number): number | undefined {
  let p = s;
  const neg = b[p] === 0x2d;
  if (neg) p++;
  if (b[e - 1] === 0x75) e--; // u
  if (p >= e || e - p > 14) return undefined;
  let v = 0;
  if (b[p] === 0x30 && b[p + 1] === 0x78) {
    if (p + 2 >= e) return undefined;
    for (p += 2; p < e; p++) { const d = hexDigit(b[p]!); if (d < 0) return undefined; v = v * 16 + d; }
  } else {
    for (; p < e; p++) { if (b[p]! < 0x30 || b[p]! > 0x39) return undefined; v = v * 10 + b[p]! - 0x30; }
  }
  return neg ? -v : v;
}

/** The model's element i as the C integer type reads it (bool as uint8_t). */
function intElement(dv: DataView, i: number, type: string): number {
  switch (type) {
    case 'int8_t': return dv.getInt8(i);
    case 'uint8_t': return dv.getUint8(i);
    case 'int16_t': return dv.getInt16(i * 2, true);
    case 'uint16_t': return dv.getUint16(i * 2, true);
    case 'int32_t': return dv.getInt32(i * 4, true);
    default: return dv.getUint32(i * 4, true);
  }
}

interface Declared { type: string; length: number; rank: number; dims: number[]; count: number }

/**
 * weights.h: `#define PLEAT_WEIGHT_TENSORS N`, then per tensor `#define ID_RANK r`, `#define ID_DIMi d`,
 * `#define ID_COUNT n` (ID upper-cased) and `extern const TYPE id[len];`.
 */
function parseHeader(raw: string): { tensors: number; declared: Map<string, Declared> } {
  const macros = new Map<string, number>();
  const externs = new Map<string, { type: string; length: number }>();
  for (const line of raw.split('\n')) {
    let m: RegExpExecArray | null;
    if ((m = /^#define (\w+) (\d+)$/.exec(line))) {
      if (macros.has(m[1]!)) fail(`weights.h defines ${m[1]} twice`);
      macros.set(m[1]!, Number(m[2]));
    } else if ((m = /^extern const (\w+) (\w+)\[(\d+)\];$/.exec(line))) {
      if (externs.has(m[2]!)) fail(`weights.h declares ${m[2]} twice`);
      externs.set(m[2]!, { type: m[1]!, length: Number(m[3]) });
    }
  }
  const tensors = macros.get('PLEAT_WEIGHT_TENSORS') ?? fail('weights.h has no PLEAT_WEIGHT_TENSORS');
  const declared = new Map<string, Declared>();
  const upper = new Set<string>();
  for (const [id, e] of externs) {
    const U = id.toUpperCase();
    if (upper.has(U)) fail(`weights.h: two arrays share the macro prefix ${U}`);
    upper.add(U);
    const rank = macros.get(`${U}_RANK`) ?? fail(`weights.h has no ${U}_RANK`);
    const dims = Array.from({ length: rank }, (_, i) => macros.get(`${U}_DIM${i}`) ?? fail(`weights.h has no ${U}_DIM${i}`));
    declared.set(id, { ...e, rank, dims, count: macros.get(`${U}_COUNT`) ?? fail(`weights.h has no ${U}_COUNT`) });
  }
  return { tensors, declared };
}

/**
 * Parse the staged weights.c and weights.h and compare every array with the model. weights.c, as the generator
 * writes it: per tensor `PLEAT_ALIGN16 const TYPE id[len] = {`, lines of comma-terminated literals, then `};`
 * (a tensor with no elements holds one `0`). Floats are C99 hexadecimal literals (exact) or NAN/INFINITY; 16-bit
 * floats are hexadecimal bit patterns; integers decimal (INT64_C/UINT64_C beyond 32 bits). NAN keeps no payload
 * (weights.h says so), so a NaN element matches any NaN of the model; every other element matches bit for bit.
 */
function readBackC(hPath: string, cPath: string, listed: ManifestTensor[], tally: { bytes: number }): void {
  const h = parseHeader(text('weights.h', readWhole('weights.h', hPath, tally)));
  const bySymbol = new Map<string, ManifestTensor>();
  for (const t of listed) {
    const want = CARRIED[t.tensor.dataType]!.c;
    if (t.entry.file !== 'weights.c' || t.entry.c_type !== want || typeof t.entry.symbol !== 'string') {
      fail(`tensor '${t.name}': manifest.json places it at ${JSON.stringify(t.entry.file)} symbol ${JSON.stringify(t.entry.symbol)} (${JSON.stringify(t.entry.c_type)}), not a ${want} array of weights.c`);
    }
    if (bySymbol.has(t.entry.symbol as string)) fail(`manifest.json gives '${t.name}' and '${bySymbol.get(t.entry.symbol as string)!.name}' the same symbol ${String(t.entry.symbol)}`);
    bySymbol.set(t.entry.symbol as string, t);
    const d = h.declared.get(t.entry.symbol as string) ?? fail(`tensor '${t.name}': weights.h declares no ${String(t.entry.symbol)}`);
    if (d.type !== want || d.length !== Math.max(t.count, 1) || d.count !== t.count || !sameList(d.dims, t.tensor.dims)) {
      fail(`tensor '${t.name}': weights.h declares ${d.type} ${String(t.entry.symbol)}[${d.length}] of shape [${d.dims.join(',')}] and ${d.count} elements, the checked model ${want} [${t.tensor.dims.join(',')}] of ${t.count}`);
    }
  }
  if (h.tensors !== listed.length || h.declared.size !== listed.length) {
    fail(`weights.h declares ${h.declared.size} arrays (PLEAT_WEIGHT_TENSORS ${h.tensors}), manifest.json lists ${listed.length} tensors`);
  }

  const f = new FileReader('weights.c', cPath, tally);
  const defined = new Set<string>();
  let cur: { t: ManifestTensor; type: string; want: Uint8Array; dv: DataView; at: number; length: number } | undefined;
  const mismatch = (tok: string): never => differs(cur!.t, cur!.at - 1, 'weights.c', `'${tok}'`, hexBits(cur!.want, (cur!.at - 1) * cur!.t.size, cur!.t.size));
  /** Any literal, from its text (the general path: every form the generator writes). */
  const slowElement = (tok: string) => {
    const { t, type, want } = cur!;
    const i = cur!.at - 1;
    const bits = elementBits(want, i, t.size);
    if (type === 'float' || type === 'double') {
      const got = floatLiteralBits(tok, type === 'double');
      if (got === undefined) differs(t, i, 'weights.c', `'${tok}' (not an exact ${type} literal)`, hexBits(want, i * t.size, t.size));
      if (got === 'nan' ? !isNaNBits(bits, t.size) : got !== bits) mismatch(tok);
      return;
    }
    const v = intLiteral(tok);
    const [lo, hi] = INT_RANGE[type]!;
    if (v === undefined || v < lo || v > hi || BigInt.asUintN(8 * t.size, v) !== bits) mismatch(tok);
  };
  /** The literal in b[s, e): the common forms are read from the bytes, the rest through slowElement. */
  const element = (b: Uint8Array, s: number, e: number) => {
    const c = cur!;
    const i = c.at++;
    if (i >= c.length) fail(`tensor '${c.t.name}': weights.c's array ${String(c.t.entry.symbol)} holds more than its ${c.length} elements`);
    if (c.t.count === 0) {
      if (e - s !== 1 || b[s] !== 0x30) fail(`tensor '${c.t.name}': the placeholder of its empty array is ${latin1(b, s, e)}, not 0`);
      return;
    }
    if (c.type === 'float') {
      const got = hexFloat32At(b, s, e);
      if (got !== undefined) { if (got !== c.dv.getUint32(i * 4, true)) mismatch(latin1(b, s, e)); return; }
    } else if (c.type !== 'double' && c.t.size <= 4) {
      const got = plainIntAt(b, s, e);
      if (got !== undefined) { if (got !== intElement(c.dv, i, c.type)) mismatch(latin1(b, s, e)); return; }
    }
    slowElement(latin1(b, s, e));
  };
  const line = (b: Uint8Array, s: number, e: number) => {
    if (cur && !(e - s === 2 && b[s] === 0x7d && b[s + 1] === 0x3b)) { // not "};"
      // "  lit, lit, ..., lit,"
      if (e - s < 4 || b[s] !== 0x20 || b[s + 1] !== 0x20 || b[e - 1] !== 0x2c) fail(`tensor '${cur.t.name}': weights.c has a line in its array that is no list of literals: ${JSON.stringify(latin1(b, s, Math.min(e, s + 60)))}`);
      let p = s + 2;
      while (p < e) {
        let comma = p;
        while (b[comma] !== 0x2c) comma++;
        element(b, p, comma);
        if (comma === e - 1) break;
        if (b[comma + 1] !== 0x20) fail(`tensor '${cur.t.name}': weights.c has a malformed list of literals: ${JSON.stringify(latin1(b, s, Math.min(e, s + 60)))}`);
        p = comma + 2;
      }
      return;
    }
    if (cur) {
      if (cur.at !== cur.length) fail(`tensor '${cur.t.name}': weights.c's array ${String(cur.t.entry.symbol)} holds ${cur.at} of its ${cur.length} elements`);
      cur = undefined;
      return;
    }
    const str = latin1(b, s, e);
    const m = /^PLEAT_ALIGN16 const (\w+) (\w+)\[(\d+)\] = \{$/.exec(str);
    if (!m) {
      if (str.startsWith('  ') && str.endsWith(',')) fail(`weights.c has a line outside any array that looks like data: ${JSON.stringify(str.slice(0, 60))}`);
      return;
    }
    const t = bySymbol.get(m[2]!) ?? fail(`weights.c defines ${m[2]}, which manifest.json does not list`);
    if (defined.has(m[2]!)) fail(`weights.c defines ${m[2]} twice`);
    defined.add(m[2]!);
    if (m[1] !== CARRIED[t.tensor.dataType]!.c || Number(m[3]) !== Math.max(t.count, 1)) fail(`tensor '${t.name}': weights.c defines ${m[1]} ${m[2]}[${m[3]}], not ${CARRIED[t.tensor.dataType]!.c} [${Math.max(t.count, 1)}]`);
    const want = modelBytes(t.tensor, t.size);
    if (want.byteLength !== t.count * t.size) fail(`tensor '${t.name}': the checked model holds ${want.byteLength / t.size} of its ${t.count} elements`);
    cur = { t, type: m[1]!, want, dv: new DataView(want.buffer, want.byteOffset, want.byteLength), at: 0, length: Math.max(t.count, 1) };
  };
  try {
    // line by line, a chunk at a time (the text of a large model is several times its weights); a line cut by
    // the chunk's end moves to the front and the next read goes after it
    let buf = new Uint8Array(CHUNK);
    let have = 0;
    for (let pos = 0; ;) {
      const len = Math.min(buf.length - have, f.size - pos);
      f.read(buf, pos, len, have);
      pos += len;
      have += len;
      const view = Buffer.from(buf.buffer, 0, have);
      let start = 0;
      for (let nl = view.indexOf(10, start); nl >= 0; nl = view.indexOf(10, start)) {
        line(buf, start, nl);
        start = nl + 1;
      }
      if (pos >= f.size) {
        if (start < have) line(buf, start, have);
        break;
      }
      buf.copyWithin(0, start, have);
      have -= start;
      if (have === buf.length) { const wider = new Uint8Array(buf.length * 2); wider.set(buf); buf = wider; } // a line longer than the buffer
    }
  } finally {
    f.close();
  }
  if (cur) fail(`tensor '${cur.t.name}': weights.c ends inside its array`);
  for (const t of listed) if (!defined.has(t.entry.symbol as string)) fail(`tensor '${t.name}' is listed in manifest.json but weights.c defines no ${String(t.entry.symbol)}`);
}

// ---- the read back ----------------------------------------------------------------------------------

/**
 * Test hook: PLEAT_TAMPER_BUNDLE=<file>:<byte> changes one byte of the staged FILE (weights.safetensors, weights.c,
 * weights.h, manifest.json) before it is read back, as a serialization defect would: its lowest bit is flipped, and
 * in the text files a hexadecimal digit stays one (0<->1 ... 8<->9, a<->b, c<->d, e<->f). Used by
 * test/ship/read-back.test.ts and test/cli/export.test.ts to show the read back catching it.
 */
function tamperForTest(paths: ReadonlyMap<string, string>): void {
  const m = /^(.+):(\d+)$/.exec(process.env.PLEAT_TAMPER_BUNDLE ?? '');
  const path = m && paths.get(m[1]!);
  if (!path) return;
  const fd = openSync(path, 'r+');
  try {
    const b = new Uint8Array(1);
    readSync(fd, b, 0, 1, Number(m[2]));
    const c = b[0]!;
    b[0] = m[1] !== 'weights.safetensors' && c >= 0x61 && c <= 0x66 ? (c & 1 ? c + 1 : c - 1) : c ^ 1;
    writeSync(fd, b, 0, 1, Number(m[2]));
  } finally {
    closeSync(fd);
  }
}

/**
 * Read the staged bundle back (`paths`: file name -> the staged file to read, manifest.json included) and compare
 * it with the checked model; throws BundleMismatch naming the first difference.
 */
export function readBackBundle(model: Model, format: 'safetensors' | 'c', paths: ReadonlyMap<string, string>): BundleReadBack {
  tamperForTest(paths);
  const tally = { bytes: 0 };
  const path = (name: string) => paths.get(name) ?? fail(`${name} was not staged`);
  const weightFiles = format === 'safetensors' ? ['weights.safetensors'] : ['weights.h', 'weights.c'];
  const manifest = parseJson('manifest.json', text('manifest.json', readWhole('manifest.json', path('manifest.json'), tally)));
  const listed = checkManifest(model, manifest, format, weightFiles);
  const provenance = new Map(model.metadata.filter(([k]) => k.startsWith('pleat.')));
  const differ = provenanceDiffers(provenance, manifest.provenance);
  if (differ) fail(`manifest.json's provenance ${differ}`);
  if (format === 'safetensors') readBackSafetensors(path('weights.safetensors'), listed, provenance, tally);
  else readBackC(path('weights.h'), path('weights.c'), listed, tally);
  const elements = listed.reduce((a, t) => a + t.count, 0);
  return {
    status: listed.length ? 'passed' : 'skipped',
    tensors: listed.length,
    elements,
    bytes: listed.reduce((a, t) => a + t.count * t.size, 0),
    fileBytes: tally.bytes,
  };
}
