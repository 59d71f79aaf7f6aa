// Model inputs for evaluate and compare: the --input/--shape/--dim flags, input files (.npy, or .pb holding a
// serialized ONNX TensorProto), each graph input's concrete shape, and seeded probe values for inputs no file
// gives.
import { readFileSync, statSync } from 'node:fs';
import { MAX_PROBES, MAX_SEED } from './probe-bounds.js';
import { PLAIN_WHOLE } from './option-values.js';
import { extname } from 'node:path';
import { DataType, elementCount, rawByteLength, storageKind, type DataTypeCode, type Dim, type Graph, type Tensor, type ValueInfo } from '../graph/ir.js';
import type { Value } from '../eval/value.js';
import { PleatError } from '../errors.js';
import { checkAllocation, formatBytes, probeMemoryLimit } from '../eval/budget.js';
import { freshFloat64 } from '../eval/pool.js';
import { checkProbeShapes } from './probe-budget.js';
import { bytesPerElement, dataTypeName, isFloatType, roundToStorage, storedElementCount, tensorToFloat64 } from '../graph/tensor.js';
import { parseTensor } from '../onnx/read.js';
import { readNpy } from './npy.js';
import { canBeWide, EXACT_INTEGER_LIMIT, firstWideInTensor, firstWideValue, type WideValue } from './wide-integers.js';

/** A value given for an input, with the file it came from (for messages). */
export interface InputValue extends Value {
  file?: string;
  /** Read from a file: its first int64/uint64 element beyond 2^53, exactly (that element is rounded in `data`). */
  wide?: WideValue;
}

/** The raw flag strings as typed (each repeatable). */
export interface InputFlags {
  input?: readonly string[];
  shape?: readonly string[];
  dim?: readonly string[];
}

/** Parsed flags: input files by input name, shapes by input name, sizes by dim symbol. */
export interface InputSettings {
  files: Map<string, string>;
  shapes: Map<string, number[]>;
  dims: Map<string, number>;
}

function splitFlag(flag: string, text: string, form: string, last: boolean): [string, string] {
  const at = last ? text.lastIndexOf('=') : text.indexOf('=');
  if (at <= 0) throw new PleatError('usage', `--${flag} '${text}' should be ${form}`);
  return [text.slice(0, at), text.slice(at + 1)];
}

function count(flag: string, text: string, s: string): number {
  // (plain decimal digits only, as every count flag takes them: ' 3', 010 or 0x10 is refused, not read as 3, 10, 16)
  if (!PLAIN_WHOLE.test(s)) throw new PleatError('usage', `--${flag} '${text}': '${s}' is not a non-negative whole number in plain decimal digits`);
  const n = Number(s);
  if (!Number.isSafeInteger(n)) throw new PleatError('usage', `--${flag} '${text}': '${s}' is too large a size`);
  return n;
}

/** Parse `--input NAME=FILE`, `--shape NAME=1x3x224x224` (empty for a scalar) and `--dim SYMBOL=N`. */
export function parseInputFlags(flags: InputFlags): InputSettings {
  const files = new Map<string, string>();
  const shapes = new Map<string, number[]>();
  const dims = new Map<string, number>();
  for (const text of flags.input ?? []) {
    const [name, file] = splitFlag('input', text, 'NAME=FILE (a .npy or .pb file)', false);
    if (file === '') throw new PleatError('usage', `--input '${text}' names no file: write NAME=FILE`);
    if (files.has(name)) throw new PleatError('usage', `--input for '${name}' is given twice`);
    files.set(name, file);
  }
  for (const text of flags.shape ?? []) {
    const [name, spec] = splitFlag('shape', text, 'NAME=DIMS, for example image=1x3x224x224', true);
    if (shapes.has(name)) throw new PleatError('usage', `--shape for '${name}' is given twice`);
    shapes.set(name, spec.trim() === '' ? [] : spec.split(/[x,]/).map((d) => count('shape', text, d)));
  }
  for (const text of flags.dim ?? []) {
    const [sym, n] = splitFlag('dim', text, 'SYMBOL=N, for example batch=1', true);
    if (dims.has(sym)) throw new PleatError('usage', `--dim '${sym}' is given twice`);
    dims.set(sym, count('dim', text, n));
  }
  return { files, shapes, dims };
}

/** Read one input file: .npy, or .pb holding a serialized ONNX TensorProto. Errors name the file. */
export function loadInputFile(path: string): InputValue {
  const ext = extname(path).toLowerCase();
  if (ext !== '.npy' && ext !== '.pb') {
    throw new PleatError('bad-input', `${path}: pleat reads input values from .npy files or .pb files (a serialized ONNX TensorProto)`);
  }
  // (a FIFO or device would block the read until something writes to it, or for ever)
  let st;
  try { st = statSync(path); } catch (e) {
    throw new PleatError('bad-input', `${path}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  if (st.isDirectory()) throw new PleatError('bad-input', `${path}: is a folder, expected an input value file (.npy or .pb)`);
  if (!st.isFile()) throw new PleatError('bad-input', `${path}: not a regular file (a FIFO, socket or device), expected an input value file (.npy or .pb)`);
  if (ext === '.npy') return { ...readNpy(path), file: path };
  // (the file is read and parsed whole, so its size is checked first; the values in it take at most 8 bytes each,
  // as the float64 value holding them does, bar packed int64 varints of up to 10, so a file beyond the limit
  // holds a value beyond or near it; the value's own size is checked before it is decoded)
  const limit = probeMemoryLimit();
  if (st.size > limit) {
    throw new PleatError('bad-input', `${path}: ${formatBytes(st.size)}, beyond the probe memory limit of ${formatBytes(limit)} for the value it holds; raise --max-probe-memory`);
  }
  let bytes: Uint8Array;
  try {
    bytes = readFileSync(path);
  } catch (e) {
    throw new PleatError('bad-input', `${path}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  try {
    const t = parseTensor(bytes); // .pb: a serialized ONNX TensorProto
    checkTensorFile(t);
    const n = elementCount(t.dims);
    if (n * 8 > limit) {
      throw new PleatError('bad-input', `dims [${t.dims.join(',')}] hold ${n} values, ${formatBytes(n * 8)} as the evaluator holds them (float64), beyond the probe memory limit of ${formatBytes(limit)}; raise --max-probe-memory`);
    }
    const wide = firstWideInTensor(t);
    return { type: t.dataType, dims: [...t.dims], data: tensorToFloat64(t), file: path, ...(wide ? { wide } : {}) };
  } catch (e) {
    if (e instanceof PleatError) throw new PleatError('bad-input', `${path}: ${e.message}`);
    throw e;
  }
}

/** The typed field each element type keeps its values in (onnx.proto3, TensorProto), when not in raw_data. */
const TYPED_FIELD: Partial<Record<string, readonly number[]>> = {
  float_data: [DataType.FLOAT, DataType.COMPLEX64],
  int32_data: [DataType.INT32, DataType.INT16, DataType.INT8, DataType.UINT16, DataType.UINT8, DataType.BOOL, DataType.FLOAT16, DataType.BFLOAT16],
  int64_data: [DataType.INT64],
  double_data: [DataType.DOUBLE, DataType.COMPLEX128],
  uint64_data: [DataType.UINT32, DataType.UINT64],
  string_data: [DataType.STRING],
};
const SEGMENT_FIELD = 3;

/**
 * A value file's tensor is used whole, so it must be exactly what its dims and type say: the model reader lets
 * an initializer hold more than its dims need, but a value file holding more, or its values in another type's
 * field, or only a segment, was made wrong, and reading part of it would be a silent truncation.
 */
function checkTensorFile(t: Tensor): void {
  const type = dataTypeName(t.dataType);
  if (storageKind(t) === 'external') throw new PleatError('bad-input', `tensor '${t.name}' keeps its values in an external file (data_location EXTERNAL); an input .pb must hold them itself`);
  if (t.extra.some((f) => f.field === SEGMENT_FIELD)) throw new PleatError('bad-input', `tensor '${t.name}' is one segment of a larger tensor (TensorProto.segment); give the whole tensor in one file`);
  const n = elementCount(t.dims);
  const raw = rawByteLength(t);
  const bpe = bytesPerElement(t.dataType);
  if (raw >= 0) {
    if (bpe !== undefined && raw !== n * bpe) {
      throw new PleatError('bad-input', `tensor '${t.name}' holds ${raw} bytes of raw_data but its dims [${t.dims.join(',')}] of ${type} need ${n * bpe}`);
    }
    return;
  }
  const kind = storageKind(t);
  const allowed = TYPED_FIELD[kind];
  if (allowed === undefined) return; // no data at all: the element count check of the decode says so
  if (!allowed.includes(t.dataType)) {
    const right = Object.entries(TYPED_FIELD).find(([, types]) => types!.includes(t.dataType))?.[0];
    throw new PleatError('bad-input', `tensor '${t.name}' is ${type} but holds its values in ${kind}${right ? ` (${type} values go in ${right} or raw_data)` : ''}`);
  }
  const have = storedElementCount(t);
  if (have !== n) throw new PleatError('bad-input', `tensor '${t.name}' holds ${have} values in ${kind} but its dims [${t.dims.join(',')}] need ${n}`);
}

/** Load every `--input` file. */
export function loadInputFiles(files: ReadonlyMap<string, string>): Map<string, InputValue> {
  const out = new Map<string, InputValue>();
  for (const [name, path] of files) out.set(name, loadInputFile(path));
  return out;
}

// ---- shapes -------------------------------------------------------------------------------------------

/** One graph input the run needs, with its concrete shape and, when given, its value. */
export interface InputSpec {
  name: string;
  type: DataTypeCode;
  dims: number[];
  /** The value from a file or the caller; absent means probes generate one. */
  given?: InputValue;
}

const show = (dims: readonly Dim[]) => `[${dims.map((d) => (d === null ? '?' : d)).join(',')}]`;
/** The --shape to give, with N for each size to choose (a '?' there was copied as is, and refused). */
const template = (vi: ValueInfo) => `${(vi.shape ?? []).map((d) => (typeof d === 'number' ? d : 'N')).join('x')} (each N a size of 1 or more)`;

/**
 * Resolve the concrete shape of every graph input the run needs (inputs without an initializer default, plus
 * defaulted ones the caller gives a value for). Symbolic dims are bound by --dim, then by --shape and given
 * values; ONNX names the same symbol for the same size, so two sources disagreeing on a symbol is an error.
 */
export function resolveInputs(graph: Graph, given: ReadonlyMap<string, InputValue>, shapes: ReadonlyMap<string, number[]> = new Map(),
  dims: ReadonlyMap<string, number> = new Map(), assumed?: AssumedDim[]): InputSpec[] {
  const byName = new Map(graph.inputs.map((i) => [i.name, i]));
  // initializers that are also inputs (defaults): a set of the few input names, not of every initializer
  const inits = new Set<string>();
  for (const t of graph.initializers) if (byName.has(t.name)) inits.add(t.name);
  const list = graph.inputs.map((i) => i.name).join(', ') || '(none)';
  for (const [flag, names] of [['input', given.keys()], ['shape', shapes.keys()]] as const) {
    for (const name of names) {
      if (!byName.has(name)) throw new PleatError('bad-input', `--${flag} '${name}': the model has no input named '${name}' (its inputs: ${list})`);
    }
  }
  const bound = new Map<string, { size: number; from: string }>();
  for (const [sym, n] of dims) bound.set(sym, { size: n, from: `--dim ${sym}=${n}` });

  // Check a concrete shape against the declared one, binding symbols it fixes.
  const fit = (vi: ValueInfo, got: number[], source: string): void => {
    const want = vi.shape;
    if (!want) return;
    const mismatch = () => new PleatError('bad-input', `input '${vi.name}' expects shape ${show(want)} but ${source} has [${got.join(',')}]`);
    if (want.length !== got.length) throw mismatch();
    want.forEach((d, k) => {
      if (typeof d === 'number') { if (d !== got[k]) throw mismatch(); return; }
      if (typeof d !== 'string' || d === '') return;
      const b = bound.get(d);
      if (!b) bound.set(d, { size: got[k]!, from: source });
      else if (b.size !== got[k]) {
        throw new PleatError('bad-input', `input '${vi.name}' dim '${d}' is ${got[k]} in ${source} but ${b.size} from ${b.from}`);
      }
    });
  };

  const needed = graph.inputs.filter((i) => !inits.has(i.name) || given.has(i.name));
  for (const vi of needed) {
    const s = shapes.get(vi.name);
    if (s) fit(vi, s, `--shape ${vi.name}=${s.join('x')}`);
  }
  for (const vi of needed) {
    const v = given.get(vi.name);
    if (!v) continue;
    const source = v.file ?? 'the given value';
    if (v.data.length !== elementCount(v.dims)) {
      throw new PleatError('bad-input', `input '${vi.name}': ${source} holds ${v.data.length} values for shape [${v.dims.join(',')}]`);
    }
    if (vi.elemType !== undefined && vi.elemType !== v.type) {
      throw new PleatError('bad-input', `input '${vi.name}' expects ${dataTypeName(vi.elemType)} but ${source} holds ${dataTypeName(v.type)}`);
    }
    const s = shapes.get(vi.name);
    if (s && (s.length !== v.dims.length || s.some((d, k) => d !== v.dims[k]))) {
      throw new PleatError('bad-input', `input '${vi.name}': --shape says [${s.join(',')}] but ${source} has [${v.dims.join(',')}]`);
    }
    fit(vi, v.dims, source);
    const wide = canBeWide(v.type) ? v.wide ?? firstWideValue(v.data) : undefined;
    if (wide) {
      throw new PleatError('bad-input', `input '${vi.name}': ${source} holds ${wide.text} (element ${wide.index}), beyond 2^53 = ${EXACT_INTEGER_LIMIT}; pleat's evaluator holds integers in float64, which would round it`);
    }
  }

  return needed.map((vi): InputSpec => {
    if (vi.elemType === undefined) {
      throw new PleatError('dtype-unsupported', `input '${vi.name}' is not a tensor (sequence, map or optional inputs are not supported)`);
    }
    const v = given.get(vi.name);
    if (v) return { name: vi.name, type: vi.elemType, dims: [...v.dims], given: v };
    const s = shapes.get(vi.name);
    if (s) return { name: vi.name, type: vi.elemType, dims: [...s] };
    if (!vi.shape) {
      throw new PleatError('missing-shape', `input '${vi.name}' has no shape in the model: set it with --shape ${vi.name}=DIMS (for example 1x3x224x224) or --input ${vi.name}=FILE`);
    }
    const out = vi.shape.map((d, k): number => {
      // a declared size the probe would be allocated from: refuse what no tensor can have
      if (typeof d === 'number') {
        if (!Number.isSafeInteger(d) || d < 0) throw new PleatError('bad-model', `input '${vi.name}' dim ${k} is ${d}: a size must be a whole number of at least 0`);
        return d;
      }
      if (typeof d === 'string' && d !== '') {
        const b = bound.get(d);
        const chosen = assumed?.find((x) => x.symbol === d);
        if (chosen && !chosen.inputs.includes(vi.name)) chosen.inputs.push(vi.name);
        if (b) return b.size;
        if (assumed) {
          // probes take size 1 for a symbol nothing sets; the report lists each one so chosen
          bound.set(d, { size: 1, from: 'the probe default' });
          assumed.push({ symbol: d, size: 1, inputs: [vi.name] });
          return 1;
        }
        throw new PleatError('missing-shape', `input '${vi.name}' dim '${d}' is dynamic: set it with --dim ${d}=N or --shape ${vi.name}=${template(vi)}`);
      }
      throw new PleatError('missing-shape', `input '${vi.name}' dim ${k} has no size or name: set it with --shape ${vi.name}=${template(vi)}`);
    });
    return { name: vi.name, type: vi.elemType, dims: out };
  });
}

/** A symbolic dim no --dim, --shape or input file set, which the probes took as 1. */
export interface AssumedDim {
  symbol: string;
  size: number;
  /** The inputs whose shape names the symbol. */
  inputs: string[];
}

/**
 * Probes of zero elements compare nothing, so a size 0 from --dim or --shape is refused for them (a run on
 * given input files may still hold empty tensors).
 */
export function refuseEmptyProbeDims(dims: ReadonlyMap<string, number>, shapes: ReadonlyMap<string, number[]>): void {
  for (const [sym, n] of dims) {
    if (n === 0) throw new PleatError('usage', `--dim ${sym}=0: probes need at least one element; give ${sym} a size of 1 or more`);
  }
  for (const [name, s] of shapes) {
    if (s.includes(0)) throw new PleatError('usage', `--shape ${name}=${s.join('x')}: probes need at least one element; give every dim a size of 1 or more`);
  }
}

/** Dim symbols named in any input shape of these graphs. */
export function dimSymbols(graphs: readonly Graph[]): Set<string> {
  const out = new Set<string>();
  for (const g of graphs) for (const i of g.inputs) for (const d of i.shape ?? []) if (typeof d === 'string' && d !== '') out.add(d);
  return out;
}

/** A --dim naming no symbol of any model's inputs is almost always a typo: say so. */
export function checkDimFlags(dims: ReadonlyMap<string, number>, graphs: readonly Graph[]): void {
  const known = dimSymbols(graphs);
  for (const sym of dims.keys()) {
    if (!known.has(sym)) {
      const list = [...known].sort().join(', ') || 'none';
      throw new PleatError('usage', `--dim '${sym}' matches no dynamic dim of the model inputs (their dims: ${list})`);
    }
  }
}

// ---- probes -------------------------------------------------------------------------------------------

/** Refuse a probe count outside 1..MAX_PROBES (`flag` names where it came from). */
export function checkProbeCount(n: number, flag = '--probes'): void {
  if (!Number.isInteger(n) || n < 1 || n > MAX_PROBES) throw new PleatError('usage', `${flag} ${n}: give a whole number from 1 to ${MAX_PROBES}`);
}

/** Refuse a seed outside 0..MAX_SEED: the report records the seed given, so it must be the one the probes used. */
export function checkSeed(seed: number, flag = '--seed'): void {
  if (!Number.isInteger(seed) || seed < 0 || seed > MAX_SEED) {
    throw new PleatError('usage', `${flag} ${seed}: give a whole number from 0 to ${MAX_SEED} (the probe generator takes 32 bits)`);
  }
}

/** splitmix32: a small, well-mixed 32-bit generator (public-domain construction); returns uniforms in [0, 1). */
export function splitmix32(seed: number): () => number {
  let a = seed | 0;
  return () => {
    a = (a + 0x9e3779b9) | 0;
    let t = a ^ (a >>> 16);
    t = Math.imul(t, 0x21f0aaad);
    t ^= t >>> 15;
    t = Math.imul(t, 0x735a2d97);
    t ^= t >>> 15;
    return (t >>> 0) / 4294967296;
  };
}

/** FNV-1a over UTF-16 code units, to give each input name its own stream. */
function hashName(s: string): number {
  let h = 0x811c9dc5;
  for (let i = 0; i < s.length; i++) { h ^= s.charCodeAt(i); h = Math.imul(h, 0x01000193); }
  return h >>> 0;
}

/** The stream seed for (seed, probe, input): each input's values depend only on these, not on input order. */
function streamSeed(seed: number, probe: number, name: string): number {
  const r = splitmix32((seed | 0) ^ Math.imul(probe + 1, 0x85ebca6b));
  r(); // one step so nearby seeds diverge
  return (Math.floor(r() * 4294967296) ^ hashName(name)) | 0;
}

/** Largest integer drawn for integer inputs (values are 0..SMALL_INT_MAX), small enough to be a valid index for most axes. */
export const SMALL_INT_MAX = 3;

/** Generate one input's probe value: standard normal floats (rounded to the element type), small non-negative integers, random bools. */
export function probeValue(spec: Pick<InputSpec, 'name' | 'type' | 'dims'>, seed: number, probe: number): Value {
  const n = elementCount(spec.dims);
  checkAllocation(n, 8, `input '${spec.name}'`);
  const rand = splitmix32(streamSeed(seed, probe, spec.name));
  const data = freshFloat64(n);
  if (isFloatType(spec.type)) {
    for (let i = 0; i < n; i += 2) {
      // Box-Muller: two uniforms give two independent standard normals; 1 - u keeps the log argument in (0, 1]
      const u = 1 - rand(), v = rand();
      const r = Math.sqrt(-2 * Math.log(u));
      data[i] = r * Math.cos(2 * Math.PI * v);
      if (i + 1 < n) data[i + 1] = r * Math.sin(2 * Math.PI * v);
    }
    // rounded to the element type (float32 and float64 in place, as roundToStorage would round them)
    if (spec.type === DataType.FLOAT) for (let i = 0; i < n; i++) data[i] = Math.fround(data[i]!);
    else if (spec.type !== DataType.DOUBLE) return { type: spec.type, dims: [...spec.dims], data: roundToStorage(data, spec.type) };
    return { type: spec.type, dims: [...spec.dims], data };
  }
  if (spec.type === DataType.BOOL) {
    for (let i = 0; i < n; i++) data[i] = rand() < 0.5 ? 0 : 1;
  } else if (spec.type === DataType.STRING || spec.type === DataType.COMPLEX64 || spec.type === DataType.COMPLEX128) {
    throw new PleatError('dtype-unsupported', `input '${spec.name}' is ${dataTypeName(spec.type)}: pleat cannot generate or hold such values`);
  } else {
    for (let i = 0; i < n; i++) data[i] = Math.floor(rand() * (SMALL_INT_MAX + 1));
  }
  return { type: spec.type, dims: [...spec.dims], data };
}

/** The input values of probe number `probe` (0-based): given values as they are, the rest generated. */
export function makeProbe(specs: readonly InputSpec[], seed: number, probe: number): Map<string, Value> {
  if (probe === 0) checkProbeShapes(specs); // sizes and the memory limit, before anything is allocated
  const out = new Map<string, Value>();
  for (const s of specs) out.set(s.name, s.given ? { type: s.given.type, dims: s.given.dims, data: s.given.data } : probeValue(s, seed, probe));
  return out;
}

// ---- options shared by evaluate and compare -----------------------------------------------------------

export type MapOrRecord<V> = ReadonlyMap<string, V> | Readonly<Record<string, V>>;

/** How a run gets its inputs. Maps or plain objects are both accepted. */
export interface InputOptions {
  /** Values for graph inputs by name (for example from loadInputFiles); the rest are generated. */
  inputs?: MapOrRecord<InputValue>;
  /** Concrete shapes by input name (--shape). */
  shapes?: MapOrRecord<number[]>;
  /** Sizes of symbolic dims (--dim). */
  dims?: MapOrRecord<number>;
  /** Seed of the generated values (--seed); default 0. */
  seed?: number;
  /** Limit in bytes on the values a probe run holds at once (--max-probe-memory); default in src/eval/budget.ts. */
  maxProbeMemory?: number;
}

/** One input as a report shows it. */
export interface InputSummary {
  name: string;
  dtype: string;
  dims: number[];
  /** 'file' (from --input), 'value' (given by a library caller) or 'probe' (generated from the seed). */
  source: 'file' | 'value' | 'probe';
  file?: string;
}

export function asMap<V>(m: MapOrRecord<V> | undefined): Map<string, V> {
  if (!m) return new Map();
  if (m instanceof Map) return new Map(m as ReadonlyMap<string, V>);
  return new Map(Object.entries(m as Record<string, V>));
}

export function summarizeInputs(specs: readonly InputSpec[]): InputSummary[] {
  return specs.map((s) => {
    const out: InputSummary = { name: s.name, dtype: dataTypeName(s.type), dims: [...s.dims], source: s.given ? (s.given.file ? 'file' : 'value') : 'probe' };
    if (s.given?.file) out.file = s.given.file;
    return out;
  });
}
