// NumPy .npy files, read and written from the format's published description (numpy NEP 1, "A Simple File
// Format for NumPy Arrays", and the numpy.lib.format module documentation):
//   magic "\x93NUMPY", one byte major and one byte minor version, header length (uint16 little-endian in
//   version 1.0, uint32 in 2.0 and 3.0), then a Python dict literal with keys 'descr', 'fortran_order' and
//   'shape', padded with spaces and ended by '\n' so the data starts on an aligned offset, then the raw data.
// Version 3.0 only differs from 2.0 in allowing UTF-8 in the header.
import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { formatBytes, probeMemoryLimit } from '../eval/budget.js';
import { DataType, elementCount, type DataTypeCode } from '../graph/ir.js';
import type { Value } from '../eval/value.js';
import { firstWideInRaw, type WideValue } from './wide-integers.js';
import { PleatError } from '../errors.js';
import { bfloatBitsToNumber, dataTypeName, halfBitsToNumber, numberToBfloatBits, numberToHalfBits } from '../graph/tensor.js';

const MAGIC = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]; // \x93 N U M P Y
const HEADER_KEYS = ['descr', 'fortran_order', 'shape'];

/** numpy kind+size -> ONNX element type. */
const KIND_TO_TYPE: Record<string, DataTypeCode> = {
  f2: DataType.FLOAT16, f4: DataType.FLOAT, f8: DataType.DOUBLE,
  i1: DataType.INT8, i2: DataType.INT16, i4: DataType.INT32, i8: DataType.INT64,
  u1: DataType.UINT8, u2: DataType.UINT16, u4: DataType.UINT32, u8: DataType.UINT64,
  b1: DataType.BOOL,
};

/** ONNX element type -> little-endian numpy descr for writing. bfloat16 has no numpy type: see npyBytes. */
const TYPE_TO_DESCR: Record<number, string> = {
  [DataType.FLOAT16]: '<f2', [DataType.FLOAT]: '<f4', [DataType.DOUBLE]: '<f8',
  [DataType.INT8]: '|i1', [DataType.INT16]: '<i2', [DataType.INT32]: '<i4', [DataType.INT64]: '<i8',
  [DataType.UINT8]: '|u1', [DataType.UINT16]: '<u2', [DataType.UINT32]: '<u4', [DataType.UINT64]: '<u8',
  [DataType.BOOL]: '|b1', [DataType.BFLOAT16]: '<f4',
};

// ---- header literal -----------------------------------------------------------------------------------

type Lit = string | number | boolean | null | Lit[] | { [k: string]: Lit };

/** Deepest nesting a header may have. numpy writes a dict holding a tuple (2); a structured dtype's sub-arrays go
 * a few levels more. The parser recurses, so a header of 10^5 open brackets would otherwise overflow the stack. */
const MAX_HEADER_DEPTH = 16;

/** A parser for the small Python literal subset .npy headers use: dicts, tuples, lists, strings, ints, booleans. */
function parseLiteral(text: string, file: string): Lit {
  let i = 0;
  const fail = (what: string): never => {
    throw new PleatError('bad-input', `${file}: .npy header is not a valid dict literal (${what} at offset ${i})`);
  };
  const ws = () => { while (i < text.length && /\s/.test(text[i]!)) i++; };
  let depth = 0;
  const value = (): Lit => {
    ws();
    const c = text[i];
    if ((c === '{' || c === '(' || c === '[') && depth >= MAX_HEADER_DEPTH) fail(`nested deeper than ${MAX_HEADER_DEPTH}`);
    if (c === '{') {
      i++;
      depth++;
      const out: { [k: string]: Lit } = {};
      for (;;) {
        ws();
        if (text[i] === '}') { i++; depth--; return out; }
        const k = value();
        if (typeof k !== 'string') fail('non-string key');
        // (a Python dict keeps the last of two equal keys; a header numpy wrote never has two)
        if (Object.hasOwn(out, k as string)) throw new PleatError('bad-input', `${file}: .npy header gives '${k}' twice`);
        ws();
        if (text[i] !== ':') fail("expected ':'");
        i++;
        out[k as string] = value();
        ws();
        if (text[i] === ',') i++;
        else if (text[i] !== '}') fail("expected ',' or '}'");
      }
    }
    if (c === '(' || c === '[') {
      const close = c === '(' ? ')' : ']';
      i++;
      depth++;
      const out: Lit[] = [];
      for (;;) {
        ws();
        if (text[i] === close) { i++; depth--; return out; }
        out.push(value());
        ws();
        if (text[i] === ',') i++;
        else if (text[i] !== close) fail(`expected ',' or '${close}'`);
      }
    }
    if (c === "'" || c === '"') {
      i++;
      let s = '';
      while (i < text.length && text[i] !== c) {
        if (text[i] === '\\') i++;
        s += text[i++] ?? '';
      }
      if (i >= text.length) fail('unterminated string');
      i++;
      return s;
    }
    const m = /^(True|False|None|-?\d+L?)/.exec(text.slice(i));
    if (!m) return fail('unexpected character');
    i += m[0].length;
    if (m[0] === 'True') return true;
    if (m[0] === 'False') return false;
    if (m[0] === 'None') return null;
    const n = Number(m[0].replace('L', ''));
    // (the only integers a header holds are sizes; beyond 2^53 one would be read rounded)
    if (!Number.isSafeInteger(n)) throw new PleatError('bad-input', `${file}: .npy header's shape holds ${m[0]}, too large for a size`);
    return n;
  };
  const v = value();
  ws();
  if (i !== text.length) fail('trailing text');
  return v;
}

// ---- read ---------------------------------------------------------------------------------------------

/** A value read from a .npy file; `wide` is its first int64/uint64 element beyond 2^53 (rounded in `data`). */
export type NpyValue = Value & { wide?: WideValue };

/** What a header says: where the data starts and what it holds. */
interface NpyLayout { dataStart: number; type: DataTypeCode; dims: number[]; key: string; descr: string; little: boolean; bpe: number; n: number }

/** Bytes the fixed prefix takes before the header text (magic, version, header length). */
const PREFIX_BYTES = 12;

/**
 * Read the prefix and header from `read(offset, length)`, which answers the bytes there (fewer at the file's end);
 * `fileSize` is the whole file's. Every size is checked against it before more is read.
 */
function parseLayout(read: (at: number, length: number) => Uint8Array, fileSize: number, file: string): NpyLayout {
  const bad = (why: string): never => { throw new PleatError('bad-input', `${file}: ${why}`); };
  const prefix = read(0, Math.min(fileSize, PREFIX_BYTES));
  if (fileSize < 10 || MAGIC.some((m, k) => prefix[k] !== m)) bad('not a .npy file (missing the \\x93NUMPY magic)');
  const major = prefix[6]!;
  const dv = new DataView(prefix.buffer, prefix.byteOffset, prefix.byteLength);
  let headerLen: number, headerStart: number;
  if (major === 1) { headerLen = dv.getUint16(8, true); headerStart = 10; }
  else if (major === 2 || major === 3) {
    if (fileSize < 12) bad('truncated .npy header');
    headerLen = dv.getUint32(8, true); headerStart = 12;
  } else return bad(`unsupported .npy format version ${major}.${prefix[7]} (pleat reads 1.0, 2.0 and 3.0)`);
  const dataStart = headerStart + headerLen;
  if (dataStart > fileSize) bad('truncated .npy header');
  const headerBytes = read(headerStart, headerLen);
  let header = '';
  if (major === 3) header = new TextDecoder('utf-8').decode(headerBytes);
  else for (const b of headerBytes) header += String.fromCharCode(b); // ASCII by the format's definition
  const dict = parseLiteral(header.trim(), file);
  if (dict === null || typeof dict !== 'object' || Array.isArray(dict)) return bad('.npy header is not a dict');
  // numpy.lib.format reads a header only when its keys are exactly these three (a key it does not know may change
  // what the bytes mean), and fortran_order only when it is a bool
  for (const key of HEADER_KEYS) if (!Object.hasOwn(dict, key)) return bad(`.npy header has no '${key}' key`);
  const unknown = Object.keys(dict).find((k) => !HEADER_KEYS.includes(k));
  if (unknown !== undefined) return bad(`.npy header has a key '${unknown}' besides ${HEADER_KEYS.join(', ')}; numpy writes only those`);
  const { descr, fortran_order: fortran, shape } = dict;
  if (typeof fortran !== 'boolean') return bad(`.npy header's fortran_order is ${JSON.stringify(fortran)}, not True or False`);
  if (typeof descr !== 'string') return bad('structured (record) arrays are not supported; save a plain numeric array');
  if (fortran !== false) {
    return bad('fortran_order=True arrays are not supported; save with numpy.ascontiguousarray(a) first');
  }
  if (!Array.isArray(shape) || shape.some((d) => typeof d !== 'number' || d < 0)) return bad('.npy header has no valid shape tuple');
  const dims = shape as number[];
  const m = /^([<>|=]?)([a-zA-Z])(\d+)$/.exec(descr);
  if (!m) return bad(`unsupported .npy dtype '${descr}' (object, string and structured arrays cannot be model inputs)`);
  const [, order, kind, size] = m;
  const key = `${kind}${size}`;
  const type = KIND_TO_TYPE[key!];
  if (type === undefined) {
    return bad(`unsupported .npy dtype '${descr}'${kind === 'O' ? ' (object arrays cannot be read safely)' : ''}; pleat reads f2 f4 f8 i1-i8 u1-u8 b1`);
  }
  // '=' is native order; numpy writes '<' on every little-endian machine, and pleat treats '=' the same way.
  const little = order !== '>';
  const bpe = Number(size);
  const n = elementCount(dims);
  const need = n * bpe;
  const have = fileSize - dataStart;
  if (have !== need) {
    bad(`.npy data holds ${have} bytes but shape (${dims.join(', ')}) of ${descr} needs ${need}`);
  }
  return { dataStart, type, dims: [...dims], key: key!, descr, little, bpe, n };
}

/** Decode the data `d` (exactly n * bpe bytes) a layout describes. */
function decodeData(d: DataView, layout: NpyLayout): NpyValue {
  const { type, dims, key, little, n } = layout;
  const out = new Float64Array(n);
  switch (key) {
    case 'f2': for (let i = 0; i < n; i++) out[i] = halfBitsToNumber(d.getUint16(i * 2, little)); break;
    case 'f4': for (let i = 0; i < n; i++) out[i] = d.getFloat32(i * 4, little); break;
    case 'f8': for (let i = 0; i < n; i++) out[i] = d.getFloat64(i * 8, little); break;
    case 'i1': for (let i = 0; i < n; i++) out[i] = d.getInt8(i); break;
    case 'i2': for (let i = 0; i < n; i++) out[i] = d.getInt16(i * 2, little); break;
    case 'i4': for (let i = 0; i < n; i++) out[i] = d.getInt32(i * 4, little); break;
    case 'i8': for (let i = 0; i < n; i++) out[i] = Number(d.getBigInt64(i * 8, little)); break;
    case 'u1': for (let i = 0; i < n; i++) out[i] = d.getUint8(i); break;
    case 'u2': for (let i = 0; i < n; i++) out[i] = d.getUint16(i * 2, little); break;
    case 'u4': for (let i = 0; i < n; i++) out[i] = d.getUint32(i * 4, little); break;
    case 'u8': for (let i = 0; i < n; i++) out[i] = Number(d.getBigUint64(i * 8, little)); break;
    case 'b1': for (let i = 0; i < n; i++) out[i] = d.getUint8(i) ? 1 : 0; break;
  }
  const wide = key === 'i8' || key === 'u8' ? firstWideInRaw(d, n, key === 'i8', little) : undefined;
  return wide ? { type, dims, data: out, wide } : { type, dims, data: out };
}

/** Decode .npy bytes into a Value (all element types held as Float64Array). `file` names the source in errors. */
export function parseNpy(bytes: Uint8Array, file = '<npy>'): NpyValue {
  const layout = parseLayout((at, length) => bytes.subarray(at, at + length), bytes.length, file);
  return decodeData(new DataView(bytes.buffer, bytes.byteOffset + layout.dataStart, layout.n * layout.bpe), layout);
}

/**
 * Read a .npy file; every failure is a one-line PleatError('bad-input') naming the file. The header is read first
 * and its shape checked against the file's size and the probe memory limit (the value is held as float64) before
 * the data is read, so a file too large to hold is refused without reading it.
 */
export function readNpy(path: string): NpyValue {
  const cannot = (e: unknown) => new PleatError('bad-input', `${path}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  let fd: number;
  try { fd = openSync(path, 'r'); } catch (e) { throw cannot(e); }
  try {
    const read = (at: number, length: number): Uint8Array => {
      const buf = new Uint8Array(length);
      let got = 0;
      while (got < length) {
        const k = readSync(fd, buf, got, length - got, at + got);
        if (k === 0) break;
        got += k;
      }
      return buf.subarray(0, got);
    };
    let size: number;
    try { size = fstatSync(fd).size; } catch (e) { throw cannot(e); }
    const layout = parseLayout(read, size, path);
    const held = layout.n * 8;
    if (held > probeMemoryLimit()) {
      throw new PleatError('bad-input', `${path}: shape (${layout.dims.join(', ')}) holds ${layout.n} values, ${formatBytes(held)} as the evaluator holds them (float64), beyond the probe memory limit of ${formatBytes(probeMemoryLimit())}; raise --max-probe-memory`);
    }
    const data = read(layout.dataStart, layout.n * layout.bpe);
    if (data.length !== layout.n * layout.bpe) throw new PleatError('bad-input', `${path}: the file changed while it was read`);
    return decodeData(new DataView(data.buffer, data.byteOffset, data.byteLength), layout);
  } catch (e) {
    if (e instanceof PleatError) throw e;
    throw cannot(e);
  } finally {
    closeSync(fd);
  }
}

// ---- write --------------------------------------------------------------------------------------------

/**
 * Encode a Value as little-endian, C-order .npy bytes (version 1.0, or 2.0 when the header does not fit in
 * 65535 bytes). The header is padded with spaces and a final '\n' so the data starts at a multiple of 64.
 * bfloat16 has no numpy dtype; its values are written as float32, which holds every bfloat16 value exactly.
 */
export function npyBytes(v: Value): Uint8Array {
  const descr = TYPE_TO_DESCR[v.type];
  if (descr === undefined) {
    throw new PleatError('dtype-unsupported', `cannot write ${dataTypeName(v.type)} values as .npy`);
  }
  const n = elementCount(v.dims);
  if (v.data.length !== n) {
    throw new PleatError('bad-input', `value of dims [${v.dims.join(',')}] holds ${v.data.length} elements, not ${n}`);
  }
  const shape = v.dims.length === 1 ? `(${v.dims[0]},)` : `(${v.dims.join(', ')})`;
  const dict = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${shape}, }`;
  let major = 1;
  let prefix = 10;
  let total = Math.ceil((prefix + dict.length + 1) / 64) * 64;
  if (total - prefix > 0xffff) { major = 2; prefix = 12; total = Math.ceil((prefix + dict.length + 1) / 64) * 64; }
  const headerLen = total - prefix;
  const header = dict + ' '.repeat(headerLen - dict.length - 1) + '\n';
  const bpe = Number(descr.slice(2));
  const out = new Uint8Array(total + n * bpe);
  out.set(MAGIC, 0);
  out[6] = major;
  out[7] = 0;
  const dv = new DataView(out.buffer);
  if (major === 1) dv.setUint16(8, headerLen, true);
  else dv.setUint32(8, headerLen, true);
  for (let i = 0; i < header.length; i++) out[prefix + i] = header.charCodeAt(i);
  const data = v.data;
  const o = total;
  switch (v.type) {
    case DataType.FLOAT16: for (let i = 0; i < n; i++) dv.setUint16(o + i * 2, numberToHalfBits(data[i]!), true); break;
    case DataType.FLOAT: for (let i = 0; i < n; i++) dv.setFloat32(o + i * 4, data[i]!, true); break;
    case DataType.BFLOAT16: for (let i = 0; i < n; i++) dv.setFloat32(o + i * 4, bfloatBitsToNumber(numberToBfloatBits(data[i]!)), true); break;
    case DataType.DOUBLE: for (let i = 0; i < n; i++) dv.setFloat64(o + i * 8, data[i]!, true); break;
    case DataType.INT8: for (let i = 0; i < n; i++) dv.setInt8(o + i, data[i]!); break;
    case DataType.INT16: for (let i = 0; i < n; i++) dv.setInt16(o + i * 2, data[i]!, true); break;
    case DataType.INT32: for (let i = 0; i < n; i++) dv.setInt32(o + i * 4, data[i]!, true); break;
    case DataType.INT64: for (let i = 0; i < n; i++) dv.setBigInt64(o + i * 8, BigInt(Math.round(data[i]!)), true); break;
    case DataType.UINT8: for (let i = 0; i < n; i++) dv.setUint8(o + i, data[i]!); break;
    case DataType.UINT16: for (let i = 0; i < n; i++) dv.setUint16(o + i * 2, data[i]!, true); break;
    case DataType.UINT32: for (let i = 0; i < n; i++) dv.setUint32(o + i * 4, data[i]!, true); break;
    case DataType.UINT64: for (let i = 0; i < n; i++) dv.setBigUint64(o + i * 8, BigInt(Math.round(data[i]!)), true); break;
    case DataType.BOOL: for (let i = 0; i < n; i++) dv.setUint8(o + i, data[i] ? 1 : 0); break;
  }
  return out;
}
