// Weights as C source: a header with extern declarations and shape macros, and a .c file with 16-byte
// aligned const arrays. Floating-point elements are printed as C99 hexadecimal literals, which denote the
// stored binary value exactly, so a compiler rebuilds every float and double bit for bit.
import { DataType, type DataTypeCode } from '../graph/ir.js';
import { dataTypeName } from '../graph/tensor.js';
import type { BundleTensor } from './bundle-tensor.js';

const C_TYPES: Record<number, string> = {
  [DataType.FLOAT]: 'float', [DataType.DOUBLE]: 'double',
  [DataType.FLOAT16]: 'uint16_t', [DataType.BFLOAT16]: 'uint16_t', // raw 16-bit patterns
  [DataType.INT64]: 'int64_t', [DataType.INT32]: 'int32_t', [DataType.INT16]: 'int16_t', [DataType.INT8]: 'int8_t',
  [DataType.UINT64]: 'uint64_t', [DataType.UINT32]: 'uint32_t', [DataType.UINT16]: 'uint16_t', [DataType.UINT8]: 'uint8_t',
  [DataType.BOOL]: 'uint8_t',
};

/** The C element type for an ONNX element type, or undefined when there is none. */
export function cElementType(code: DataTypeCode): string | undefined {
  return C_TYPES[code];
}

/**
 * Valid, unique C identifiers for tensor names. Every identifier is `w_` plus the name with each character
 * outside [A-Za-z0-9_] replaced by `_`, so none is a keyword, starts with a digit, or is reserved (reserved
 * names start with `_` plus a capital, or `__`). Names that needed no cleaning claim their identifier first,
 * then the rest, each group in sorted order; a clash gets `_2`, `_3`, ... Clashes are judged ignoring case
 * because the macros use the upper-cased identifier. The result does not depend on the order of `names`.
 */
export function cIdentifiers(names: string[]): Map<string, string> {
  const out = new Map<string, string>();
  const taken = new Set<string>();
  const clean = (name: string) => name.replace(/[^A-Za-z0-9_]/g, '_') || 'unnamed';
  const unique = [...new Set(names)].sort((a, b) => (a < b ? -1 : a > b ? 1 : 0));
  const first = unique.filter((n) => clean(n) === n);
  const rest = unique.filter((n) => clean(n) !== n);
  for (const name of [...first, ...rest]) {
    const base = `w_${clean(name)}`;
    let id = base;
    for (let k = 2; taken.has(id.toLowerCase()); k++) id = `${base}_${k}`;
    taken.add(id.toLowerCase());
    out.set(name, id);
  }
  return out;
}

/**
 * Text safe inside a C block comment: printable ASCII only, no comment end, no comment start (gcc -Wcomment), no
 * two question marks in a row (a trigraph). Each step only inserts a backslash, which forms none of these.
 */
export function commentText(s: string, quote = true): string {
  return (quote ? JSON.stringify(s) : s.replace(/[\x00-\x1f]/g, ' '))
    .replace(/[^\x20-\x7e]/g, (c) => `\\u${c.charCodeAt(0).toString(16).padStart(4, '0')}`)
    .replace(/\*\//g, '*\\/')
    .replace(/\/\*/g, '/\\*')
    .replace(/\?(?=\?)/g, '?\\');
}

// ---- exact literals -------------------------------------------------------------------------------
// The .c file is nearly all element literals (about 16 bytes of text per float32), so they are written as bytes
// straight into large buffers: no string per element, few large writes. The forms (weights.h describes them):
//   float32  [-]0x1[.hex]p[+-]Ef normal, [-]0x0.hexp-126f subnormal, [-]0.0f, [-]INFINITY, NAN (no sign)
//   float64  the same without the f, subnormals p-1022
//   16-bit floats and uint16  0xHHHH (the stored bits)
//   other integers  decimal; uint32 with u; INT32_MIN as (-2147483647 - 1); 64-bit beyond 32 bits in INT64_C/UINT64_C
// with the fraction's trailing zero digits dropped. Elements go 8 to a line: "  a, b, ..., h,\n".

const HEX = Uint8Array.from('0123456789abcdef', (c) => c.charCodeAt(0));
const ascii = (s: string): Uint8Array => Uint8Array.from(s, (c) => c.charCodeAt(0));
const NAN_TEXT = ascii('NAN');
const INFINITY_TEXT = ascii('INFINITY');

/** The exponent part `p[+-]E` plus suffix for each stored exponent 1..top-1 (normal numbers); index 0 holds the subnormal one. */
function exponentTexts(top: number, bias: number, suffix: string): Uint8Array[] {
  const out: Uint8Array[] = [];
  for (let exp = 0; exp < top; exp++) {
    const e = exp === 0 ? 1 - bias : exp - bias;
    out.push(ascii(`p${e < 0 ? '' : '+'}${e}${suffix}`));
  }
  return out;
}
const EXP32 = exponentTexts(0xff, 127, 'f');
const EXP64 = exponentTexts(0x7ff, 1023, '');

const PER_LINE = 8;
/** Bytes of .c text handed out at a time (the tests pass small sizes to cross every boundary). */
const CHUNK_BYTES = 1 << 20;
/** Most bytes one element takes with its separator and a line's indent (the longest is an INT64_MIN literal). */
const MAX_ELEMENT = 48;

function put(buf: Uint8Array, p: number, text: Uint8Array): number {
  for (let k = 0; k < text.length; k++) buf[p++] = text[k]!;
  return p;
}

/** Number of trailing zero hexadecimal digits of a nonzero 32-bit value. */
const zeroNibbles = (x: number): number => (31 - Math.clz32(x & -x)) >>> 2;

/** `count` hexadecimal digits of x (most significant first, `count` <= 8) at p. */
function putHex(buf: Uint8Array, p: number, x: number, count: number): number {
  for (let s = 4 * (count - 1); s >= 0; s -= 4) buf[p++] = HEX[(x >>> s) & 15]!;
  return p;
}

/** The decimal digits of an integer 0 <= v < 2^53 at p. */
function putDecimal(buf: Uint8Array, p: number, v: number): number {
  let end = p + 1;
  for (let x = v; x >= 10; x = Math.floor(x / 10)) end++;
  for (let q = end - 1, x = v; q >= p; q--, x = Math.floor(x / 10)) buf[q] = 0x30 + (x % 10);
  return end;
}

function putFloat32(buf: Uint8Array, p: number, bits: number): number {
  const exp = (bits >>> 23) & 0xff;
  const mant = bits & 0x7fffff;
  if (exp === 0xff && mant) return put(buf, p, NAN_TEXT);
  if (bits >>> 31) buf[p++] = 0x2d; // -
  if (exp === 0xff) return put(buf, p, INFINITY_TEXT);
  if (exp === 0 && mant === 0) { buf[p] = 0x30; buf[p + 1] = 0x2e; buf[p + 2] = 0x30; buf[p + 3] = 0x66; return p + 4; } // 0.0f
  buf[p] = 0x30; buf[p + 1] = 0x78; buf[p + 2] = exp ? 0x31 : 0x30; // 0x1 or 0x0
  p += 3;
  if (mant) {
    buf[p++] = 0x2e; // .
    const m = mant << 1; // 23 bits as 6 hex digits
    const n = 6 - zeroNibbles(m);
    p = putHex(buf, p, m >>> (4 * (6 - n)), n);
  }
  return put(buf, p, EXP32[exp]!);
}

function putFloat64(buf: Uint8Array, p: number, hi: number, lo: number): number {
  const exp = (hi >>> 20) & 0x7ff;
  const mhi = hi & 0xfffff;
  if (exp === 0x7ff && (mhi || lo)) return put(buf, p, NAN_TEXT);
  if (hi >>> 31) buf[p++] = 0x2d;
  if (exp === 0x7ff) return put(buf, p, INFINITY_TEXT);
  if (exp === 0 && mhi === 0 && lo === 0) { buf[p] = 0x30; buf[p + 1] = 0x2e; buf[p + 2] = 0x30; return p + 3; } // 0.0
  buf[p] = 0x30; buf[p + 1] = 0x78; buf[p + 2] = exp ? 0x31 : 0x30;
  p += 3;
  if (lo) { // 52 bits as 5 + 8 hex digits
    buf[p++] = 0x2e;
    p = putHex(buf, p, mhi, 5);
    const n = 8 - zeroNibbles(lo);
    p = putHex(buf, p, lo >>> (4 * (8 - n)), n);
  } else if (mhi) {
    buf[p++] = 0x2e;
    const n = 5 - zeroNibbles(mhi);
    p = putHex(buf, p, mhi >>> (4 * (5 - n)), n);
  }
  return put(buf, p, EXP64[exp]!);
}

const INT32_MIN_TEXT = ascii('(-2147483647 - 1)'); // 2147483648 alone is not an int

/** A 64-bit integer literal: plain within int32's range (either sign), else wrapped in INT64_C/UINT64_C. */
function int64Text(v: bigint, unsigned: boolean): string {
  if (unsigned) return v <= 2147483647n ? `${v}u` : `UINT64_C(${v})`;
  if (v >= -2147483647n && v <= 2147483647n) return String(v);
  if (v === -(2n ** 63n)) return '(-INT64_C(9223372036854775807) - 1)';
  return v < 0n ? `(-INT64_C(${-v}))` : `INT64_C(${v})`;
}

/** Element i of the tensor as its C literal at p; returns the end. */
function putElement(t: BundleTensor, dv: DataView, i: number, buf: Uint8Array, p: number): number {
  switch (t.dataType) {
    case DataType.FLOAT: return putFloat32(buf, p, dv.getUint32(i * 4, true));
    case DataType.DOUBLE: return putFloat64(buf, p, dv.getUint32(i * 8 + 4, true), dv.getUint32(i * 8, true));
    case DataType.FLOAT16: case DataType.BFLOAT16: case DataType.UINT16:
      buf[p] = 0x30; buf[p + 1] = 0x78;
      return putHex(buf, p + 2, dv.getUint16(i * 2, true), 4);
    case DataType.UINT8: case DataType.BOOL: return putDecimal(buf, p, dv.getUint8(i));
    case DataType.INT8: case DataType.INT16: case DataType.INT32: {
      const v = t.dataType === DataType.INT8 ? dv.getInt8(i) : t.dataType === DataType.INT16 ? dv.getInt16(i * 2, true) : dv.getInt32(i * 4, true);
      if (v === I32_MIN) return put(buf, p, INT32_MIN_TEXT);
      if (v < 0) buf[p++] = 0x2d;
      return putDecimal(buf, p, Math.abs(v));
    }
    case DataType.UINT32:
      p = putDecimal(buf, p, dv.getUint32(i * 4, true));
      buf[p] = 0x75; // u
      return p + 1;
    case DataType.INT64: case DataType.UINT64: { // rare in weights: through bigint text
      const unsigned = t.dataType === DataType.UINT64;
      const text = int64Text(unsigned ? dv.getBigUint64(i * 8, true) : dv.getBigInt64(i * 8, true), unsigned);
      for (let k = 0; k < text.length; k++) buf[p++] = text.charCodeAt(k);
      return p;
    }
    default:
      throw new Error(`no C literal form for ${dataTypeName(t.dataType)}`); // callers filter types first
  }
}

/**
 * Elements [from, to) of the tensor as lines of literals ("  a, b, ..., h,\n"; a line's first element is a
 * multiple of 8) at p, which must leave MAX_ELEMENT bytes per element; returns the end.
 */
function putElements(t: BundleTensor, dv: DataView, from: number, to: number, buf: Uint8Array, p: number): number {
  const float32 = t.dataType === DataType.FLOAT;
  for (let i = from; i < to; i++) {
    const column = i % PER_LINE;
    if (column === 0) { buf[p] = 0x20; buf[p + 1] = 0x20; p += 2; }
    p = float32 ? putFloat32(buf, p, dv.getUint32(i * 4, true)) : putElement(t, dv, i, buf, p);
    buf[p] = 0x2c; // ,
    buf[p + 1] = column === PER_LINE - 1 || i === t.count - 1 ? 0x0a : 0x20;
    p += 2;
  }
  return p;
}

const I32_MIN = -2147483648;

function hasNonFinite(t: BundleTensor): boolean {
  const dv = new DataView(t.bytes.buffer, t.bytes.byteOffset, t.bytes.byteLength);
  if (t.dataType === DataType.FLOAT) {
    for (let i = 0; i < t.count; i++) if (((dv.getUint32(i * 4, true) >>> 23) & 0xff) === 0xff) return true;
  } else if (t.dataType === DataType.DOUBLE) {
    for (let i = 0; i < t.count; i++) if (((dv.getUint32(i * 8 + 4, true) >>> 20) & 0x7ff) === 0x7ff) return true;
  }
  return false;
}

/**
 * Text appended into buffers of one size; a full buffer is handed out whole (take) and a new one started, so the
 * file goes out in few large writes and memory stays near one buffer whatever the file's length.
 */
class ChunkedText {
  private buf: Uint8Array;
  private p = 0;
  private readonly ready: Uint8Array[] = [];

  constructor(private readonly size: number) {
    if (size < MAX_ELEMENT) throw new Error(`C source pieces of ${size} bytes cannot hold an element`);
    this.buf = Buffer.allocUnsafe(size);
  }

  text(s: string): void {
    const b = Buffer.from(s, 'utf8');
    if (this.p + b.byteLength > this.size) this.flush();
    if (b.byteLength > this.size) { this.ready.push(b); return; }
    this.buf.set(b, this.p);
    this.p += b.byteLength;
  }

  /** Elements of the tensor from `from` on, as many as fit in the buffer (at least one); returns the next index. */
  elements(t: BundleTensor, dv: DataView, from: number): number {
    if (this.size - this.p < MAX_ELEMENT) this.flush();
    const to = Math.min(t.count, from + Math.floor((this.size - this.p) / MAX_ELEMENT));
    this.p = putElements(t, dv, from, to, this.buf, this.p);
    return to;
  }

  flush(): void {
    if (this.p === 0) return;
    this.ready.push(this.buf.subarray(0, this.p));
    this.buf = Buffer.allocUnsafe(this.size);
    this.p = 0;
  }

  /** The full buffers so far, each handed out once. */
  take(): Uint8Array[] {
    return this.ready.splice(0);
  }
}

export interface CSource {
  header: string;
  /** The .c file in pieces of at most about `chunkBytes` bytes, so a large tensor never sits in memory as text. */
  source: Iterable<Uint8Array>;
  /** Tensor name -> C identifier. */
  symbols: Map<string, string>;
}

/**
 * Render the header and source for the tensors (already filtered to types with a C element type). The source is
 * produced as it is read, in pieces of `chunkBytes` (a piece is longer only to hold a longer line of its own).
 */
export function renderCSource(tensors: BundleTensor[], about: string, chunkBytes = CHUNK_BYTES): CSource {
  const symbols = cIdentifiers(tensors.map((t) => t.name));
  const sorted = [...tensors].sort((a, b) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
  const h: string[] = [];
  h.push(
    '/* weights.h: model weights as C arrays, written by pleat. Generated file: do not edit. */',
    `/* ${commentText(about, false)} */`,
    '/*',
    ' * Each tensor is a flat, row-major (C order) const array, 16-byte aligned, with macros for its rank,',
    ' * dimensions and element count. Element types: float32 -> float, float64 -> double, int64/int32/int16/int8',
    ' * -> int64_t/int32_t/int16_t/int8_t, uint* -> uint*_t, bool -> uint8_t (0 or 1). float16 and bfloat16',
    ' * tensors are uint16_t arrays holding the raw 16-bit patterns: convert them when loading.',
    ' * A tensor with no elements gets a one-element array and a COUNT of 0. NaN elements are written as NAN,',
    ' * which keeps them NaN but not their payload bits.',
    ' */',
    '#ifndef PLEAT_WEIGHTS_H',
    '#define PLEAT_WEIGHTS_H',
    '',
    '#include <stdint.h>',
    '',
    '#ifdef __cplusplus',
    'extern "C" {',
    '#endif',
    '',
    `#define PLEAT_WEIGHT_TENSORS ${sorted.length}`,
    '',
  );
  for (const t of sorted) {
    const id = symbols.get(t.name)!;
    const macro = id.toUpperCase();
    h.push(`/* ${commentText(t.name)}: ${dataTypeName(t.dataType)} [${t.dims.join(', ')}] */`);
    h.push(`#define ${macro}_RANK ${t.dims.length}`);
    t.dims.forEach((d, i) => h.push(`#define ${macro}_DIM${i} ${d}`));
    h.push(`#define ${macro}_COUNT ${t.count}`);
    h.push(`extern const ${cElementType(t.dataType)!} ${id}[${Math.max(t.count, 1)}];`, '');
  }
  h.push('#ifdef __cplusplus', '}', '#endif', '', '#endif /* PLEAT_WEIGHTS_H */', '');

  const needMath = sorted.some(hasNonFinite);
  function* source(): Generator<Uint8Array> {
    const out = new ChunkedText(chunkBytes);
    const c = [
      '/* weights.c: model weights as C arrays, written by pleat. Generated file: do not edit. */',
      `/* ${commentText(about, false)} */`,
      '#include "weights.h"',
    ];
    if (needMath) c.push('#include <math.h> /* INFINITY, NAN */');
    c.push(
      '',
      '#if defined(__STDC_VERSION__) && __STDC_VERSION__ >= 201112L',
      '#define PLEAT_ALIGN16 _Alignas(16)',
      '#elif defined(__GNUC__) || defined(__clang__)',
      '#define PLEAT_ALIGN16 __attribute__((aligned(16)))',
      '#else',
      '#error "weights.c needs C11 _Alignas or the GNU aligned attribute for 16-byte alignment"',
      '#endif',
      '',
    );
    out.text(c.join('\n'));
    for (const t of sorted) {
      out.text(`\n/* ${commentText(t.name)} */\nPLEAT_ALIGN16 const ${cElementType(t.dataType)!} ${symbols.get(t.name)!}[${Math.max(t.count, 1)}] = {\n`);
      if (t.count === 0) out.text('  0,\n');
      const dv = new DataView(t.bytes.buffer, t.bytes.byteOffset, t.bytes.byteLength);
      for (let i = 0; i < t.count;) {
        i = out.elements(t, dv, i);
        yield* out.take();
      }
      out.text('};\n');
      yield* out.take();
    }
    out.flush();
    yield* out.take();
  }
  return { header: h.join('\n'), source: source(), symbols };
}
