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

function hexFloat32(bits: number): string {
  const sign = bits >>> 31 ? '-' : '';
  const exp = (bits >>> 23) & 0xff;
  const mant = bits & 0x7fffff;
  if (exp === 0xff) return mant ? 'NAN' : `${sign}INFINITY`;
  if (exp === 0 && mant === 0) return `${sign}0.0f`;
  const digits = (mant << 1).toString(16).padStart(6, '0').replace(/0+$/, ''); // 23 bits as 6 hex digits
  const frac = digits ? `.${digits}` : '';
  if (exp === 0) return `${sign}0x0${frac}p-126f`; // subnormal
  const e = exp - 127;
  return `${sign}0x1${frac}p${e < 0 ? '' : '+'}${e}f`;
}

function hexFloat64(hi: number, lo: number): string {
  const sign = hi >>> 31 ? '-' : '';
  const exp = (hi >>> 20) & 0x7ff;
  const mhi = hi & 0xfffff;
  if (exp === 0x7ff) return mhi || lo ? 'NAN' : `${sign}INFINITY`;
  if (exp === 0 && mhi === 0 && lo === 0) return `${sign}0.0`;
  const digits = (mhi.toString(16).padStart(5, '0') + (lo >>> 0).toString(16).padStart(8, '0')).replace(/0+$/, '');
  const frac = digits ? `.${digits}` : '';
  if (exp === 0) return `${sign}0x0${frac}p-1022`;
  const e = exp - 1023;
  return `${sign}0x1${frac}p${e < 0 ? '' : '+'}${e}`;
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

/** C literals of elements [from, to) of the tensor (a slice at a time: a whole large tensor as strings took ~50 bytes per element). */
function literals(t: BundleTensor, from: number, to: number): string[] {
  const b = t.bytes;
  const dv = new DataView(b.buffer, b.byteOffset, b.byteLength);
  const values = new Array<string>(to - from);
  switch (t.dataType) {
    case DataType.FLOAT:
      for (let i = from; i < to; i++) {
        const bits = dv.getUint32(i * 4, true);
        values[i - from] = hexFloat32(bits);
      }
      break;
    case DataType.DOUBLE:
      for (let i = from; i < to; i++) {
        const hi = dv.getUint32(i * 8 + 4, true);
        values[i - from] = hexFloat64(hi, dv.getUint32(i * 8, true));
      }
      break;
    case DataType.FLOAT16: case DataType.BFLOAT16: case DataType.UINT16:
      for (let i = from; i < to; i++) values[i - from] = `0x${dv.getUint16(i * 2, true).toString(16).padStart(4, '0')}`;
      break;
    case DataType.UINT8: case DataType.BOOL:
      for (let i = from; i < to; i++) values[i - from] = String(dv.getUint8(i));
      break;
    case DataType.INT8: for (let i = from; i < to; i++) values[i - from] = String(dv.getInt8(i)); break;
    case DataType.INT16: for (let i = from; i < to; i++) values[i - from] = String(dv.getInt16(i * 2, true)); break;
    case DataType.INT32:
      for (let i = from; i < to; i++) {
        const v = dv.getInt32(i * 4, true);
        values[i - from] = v === I32_MIN ? '(-2147483647 - 1)' : String(v); // 2147483648 alone is not an int
      }
      break;
    case DataType.UINT32:
      for (let i = from; i < to; i++) values[i - from] = `${dv.getUint32(i * 4, true)}u`;
      break;
    case DataType.INT64:
      for (let i = from; i < to; i++) {
        const v = dv.getBigInt64(i * 8, true);
        if (v >= -2147483647n && v <= 2147483647n) values[i - from] = String(v);
        else if (v === -(2n ** 63n)) values[i - from] = '(-INT64_C(9223372036854775807) - 1)';
        else values[i - from] = v < 0n ? `(-INT64_C(${-v}))` : `INT64_C(${v})`;
      }
      break;
    case DataType.UINT64:
      for (let i = from; i < to; i++) {
        const v = dv.getBigUint64(i * 8, true);
        values[i - from] = v <= 2147483647n ? `${v}u` : `UINT64_C(${v})`;
      }
      break;
    default:
      throw new Error(`no C literal form for ${dataTypeName(t.dataType)}`); // callers filter types first
  }
  return values;
}

export interface CSource {
  header: string;
  /** The .c file in pieces (at most PER_PIECE elements each), so a large tensor never sits in memory as one string. */
  source: Iterable<string>;
  /** Tensor name -> C identifier. */
  symbols: Map<string, string>;
}

const PER_LINE = 8;
/** Elements rendered at a time (a whole number of lines). */
const PER_PIECE = PER_LINE * 8192;

/** Render the header and source for the tensors (already filtered to types with a C element type). */
export function renderCSource(tensors: BundleTensor[], about: string): CSource {
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
  function* source(): Generator<string> {
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
    yield c.join('\n');
    for (const t of sorted) {
      yield `\n/* ${commentText(t.name)} */\nPLEAT_ALIGN16 const ${cElementType(t.dataType)!} ${symbols.get(t.name)!}[${Math.max(t.count, 1)}] = {\n`;
      if (t.count === 0) yield '  0,\n';
      // in slices of whole lines, so memory stays near the tensor's own size whatever its length
      for (let from = 0; from < t.count; from += PER_PIECE) {
        const values = literals(t, from, Math.min(t.count, from + PER_PIECE));
        const lines: string[] = [];
        for (let i = 0; i < values.length; i += PER_LINE) lines.push(`  ${values.slice(i, i + PER_LINE).join(', ')},\n`);
        yield lines.join('');
      }
      yield '};\n';
    }
  }
  return { header: h.join('\n'), source: source(), symbols };
}
