// The C source writer (src/ship/c-source.ts) formats elements straight into byte buffers. Its weights.c must stay
// byte for byte what the former string-per-element writer produced, which is kept below as the reference (the
// literal forms weights.h describes, one template string per element, 8 to a line). Seeded random tensors of every
// element type the writer handles, with every class of float forced in (normal, subnormal, +-0, +-infinity, NaN
// with payloads and either sign) and the integer extremes, are rendered in pieces of several sizes, so every
// piece boundary falls inside a literal, a separator or a line somewhere. The float literals are also read back
// as numbers (C99 hexadecimal floating constants, ISO C 6.4.4.2: hex significand times 2 to the decimal
// exponent) and compared with the stored value, a check that shares no code with either formatter.
import { describe, expect, it } from 'vitest';
import { DataType, type DataTypeCode } from '../../src/graph/ir.js';
import { dataTypeName } from '../../src/graph/tensor.js';
import type { BundleTensor } from '../../src/ship/bundle-tensor.js';
import { cElementType, cIdentifiers, commentText, renderCSource } from '../../src/ship/c-source.js';
import { rng } from '../helpers/build.js';

// ---- the reference: the writer as it was, one string per element ----------------------------------

function refFloat32(bits: number): string {
  const sign = bits >>> 31 ? '-' : '';
  const exp = (bits >>> 23) & 0xff;
  const mant = bits & 0x7fffff;
  if (exp === 0xff) return mant ? 'NAN' : `${sign}INFINITY`;
  if (exp === 0 && mant === 0) return `${sign}0.0f`;
  const digits = (mant << 1).toString(16).padStart(6, '0').replace(/0+$/, '');
  const frac = digits ? `.${digits}` : '';
  if (exp === 0) return `${sign}0x0${frac}p-126f`;
  const e = exp - 127;
  return `${sign}0x1${frac}p${e < 0 ? '' : '+'}${e}f`;
}

function refFloat64(hi: number, lo: number): string {
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

function refLiteral(t: BundleTensor, i: number): string {
  const dv = new DataView(t.bytes.buffer, t.bytes.byteOffset, t.bytes.byteLength);
  switch (t.dataType) {
    case DataType.FLOAT: return refFloat32(dv.getUint32(i * 4, true));
    case DataType.DOUBLE: return refFloat64(dv.getUint32(i * 8 + 4, true), dv.getUint32(i * 8, true));
    case DataType.FLOAT16: case DataType.BFLOAT16: case DataType.UINT16: return `0x${dv.getUint16(i * 2, true).toString(16).padStart(4, '0')}`;
    case DataType.UINT8: case DataType.BOOL: return String(dv.getUint8(i));
    case DataType.INT8: return String(dv.getInt8(i));
    case DataType.INT16: return String(dv.getInt16(i * 2, true));
    case DataType.INT32: { const v = dv.getInt32(i * 4, true); return v === -2147483648 ? '(-2147483647 - 1)' : String(v); }
    case DataType.UINT32: return `${dv.getUint32(i * 4, true)}u`;
    case DataType.INT64: {
      const v = dv.getBigInt64(i * 8, true);
      if (v >= -2147483647n && v <= 2147483647n) return String(v);
      if (v === -(2n ** 63n)) return '(-INT64_C(9223372036854775807) - 1)';
      return v < 0n ? `(-INT64_C(${-v}))` : `INT64_C(${v})`;
    }
    case DataType.UINT64: { const v = dv.getBigUint64(i * 8, true); return v <= 2147483647n ? `${v}u` : `UINT64_C(${v})`; }
    default: throw new Error(`no reference literal for ${dataTypeName(t.dataType)}`);
  }
}

function refNonFinite(t: BundleTensor): boolean {
  const dv = new DataView(t.bytes.buffer, t.bytes.byteOffset, t.bytes.byteLength);
  for (let i = 0; i < t.count; i++) {
    if (t.dataType === DataType.FLOAT && ((dv.getUint32(i * 4, true) >>> 23) & 0xff) === 0xff) return true;
    if (t.dataType === DataType.DOUBLE && ((dv.getUint32(i * 8 + 4, true) >>> 20) & 0x7ff) === 0x7ff) return true;
  }
  return false;
}

function refSource(tensors: BundleTensor[], about: string): string {
  const symbols = cIdentifiers(tensors.map((t) => t.name));
  const sorted = [...tensors].sort((a, b) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0));
  const c = [
    '/* weights.c: model weights as C arrays, written by pleat. Generated file: do not edit. */',
    `/* ${commentText(about, false)} */`,
    '#include "weights.h"',
  ];
  if (sorted.some(refNonFinite)) c.push('#include <math.h> /* INFINITY, NAN */');
  c.push('', '#if defined(__STDC_VERSION__) && __STDC_VERSION__ >= 201112L', '#define PLEAT_ALIGN16 _Alignas(16)',
    '#elif defined(__GNUC__) || defined(__clang__)', '#define PLEAT_ALIGN16 __attribute__((aligned(16)))', '#else',
    '#error "weights.c needs C11 _Alignas or the GNU aligned attribute for 16-byte alignment"', '#endif', '');
  let out = c.join('\n');
  for (const t of sorted) {
    out += `\n/* ${commentText(t.name)} */\nPLEAT_ALIGN16 const ${cElementType(t.dataType)!} ${symbols.get(t.name)!}[${Math.max(t.count, 1)}] = {\n`;
    if (t.count === 0) out += '  0,\n';
    const values = Array.from({ length: t.count }, (_, i) => refLiteral(t, i));
    for (let i = 0; i < values.length; i += 8) out += `  ${values.slice(i, i + 8).join(', ')},\n`;
    out += '};\n';
  }
  return out;
}

// ---- seeded tensors of every kind ------------------------------------------------------------------

const SIZE: Record<number, number> = {
  [DataType.FLOAT]: 4, [DataType.DOUBLE]: 8, [DataType.FLOAT16]: 2, [DataType.BFLOAT16]: 2, [DataType.INT64]: 8, [DataType.INT32]: 4,
  [DataType.INT16]: 2, [DataType.INT8]: 1, [DataType.UINT64]: 8, [DataType.UINT32]: 4, [DataType.UINT16]: 2, [DataType.UINT8]: 1, [DataType.BOOL]: 1,
};

function tensor(name: string, dataType: DataTypeCode, bytes: Uint8Array, dims?: number[]): BundleTensor {
  const count = bytes.byteLength / SIZE[dataType]!;
  return { name, dims: dims ?? [count], dataType, count, elementBytes: SIZE[dataType]!, bytes };
}

const u32 = (words: number[]) => new Uint8Array(Uint32Array.from(words, (w) => w >>> 0).buffer);

/** float32 bit patterns: random words, every eighth forced into one class (zero/subnormal, or infinity/NaN). */
function randomFloat32(r: () => number, n: number): number[] {
  const words = Array.from({ length: n }, () => Math.floor(r() * 2 ** 32) >>> 0);
  for (let i = 0; i < n; i += 8) words[i] = (words[i]! & 0x807fffff) >>> 0; // subnormal (or +-0)
  for (let i = 4; i < n; i += 8) words[i] = (words[i]! | 0x7f800000) >>> 0; // NaN with a payload (or +-infinity)
  for (let i = 6; i < n; i += 16) words[i] = (words[i]! & 0xfff00000) >>> 0; // short fractions: trailing zeros dropped
  return words;
}

/** float64 words (low, high) with the same classes, and fractions that end in zeros at every length. */
function randomFloat64(r: () => number, n: number): number[] {
  const words: number[] = [];
  for (let i = 0; i < n; i++) {
    let lo = Math.floor(r() * 2 ** 32) >>> 0;
    let hi = Math.floor(r() * 2 ** 32) >>> 0;
    if (i % 8 === 0) hi = (hi & 0x800fffff) >>> 0; // subnormal
    if (i % 8 === 4) hi = (hi | 0x7ff00000) >>> 0; // NaN or infinity
    if (i % 4 === 1) lo = i % 3 ? (lo & (0xffffffff << (4 * (i % 8)))) >>> 0 : 0; // trailing zero digits in lo, or all of lo
    if (i % 16 === 3) { lo = 0; hi = (hi & (0xfffff000 | 0)) >>> 0; }
    words.push(lo, hi);
  }
  return words;
}

const SPECIAL_F32 = [0x00000000, 0x80000000, 0x00000001, 0x80000001, 0x007fffff, 0x00400000, 0x00800000, 0x3f800000, 0xbf800000,
  0x7f7fffff, 0xff7fffff, 0x7f800000, 0xff800000, 0x7fc00000, 0xffc00000, 0x7f800001, 0xff800001, 0x7fffffff, 0xffffffff, 0x3dcccccd];
const SPECIAL_F64 = [0, 0, 0, 0x80000000, 1, 0, 1, 0x80000000, 0xffffffff, 0x000fffff, 0, 0x00100000, 0, 0x3ff00000, 0, 0x3ff80000,
  0xffffffff, 0x7fefffff, 0, 0x7ff00000, 0, 0xfff00000, 0, 0x7ff80000, 1, 0x7ff00000, 0, 0xfff80001, 0x10, 0x3ff00000, 0, 0x3ff00001];

function intBytes(r: () => number, dataType: DataTypeCode, n: number): Uint8Array {
  const size = SIZE[dataType]!;
  const b = new Uint8Array(n * size);
  for (let i = 0; i < b.length; i++) b[i] = Math.floor(r() * 256);
  const dv = new DataView(b.buffer);
  // extremes and the edges where the literal changes form, at the front; small values, in the middle
  const edges: bigint[] = [0n, 1n, -1n, 9n, 10n, -10n, 127n, -128n, 255n, 32767n, -32768n, 65535n, 2147483647n, -2147483647n, -2147483648n,
    2147483648n, 4294967295n, 4294967296n, -4294967296n, 2n ** 53n + 1n, 2n ** 63n - 1n, -(2n ** 63n), -(2n ** 63n) + 1n, 2n ** 64n - 1n];
  edges.forEach((v, k) => {
    const bits = BigInt.asUintN(8 * size, v);
    for (let j = 0; j < size; j++) b[k * size + j] = Number((bits >> BigInt(8 * j)) & 0xffn);
  });
  for (let i = edges.length; i < n; i += 3) { // short numbers too, not only full-width ones
    const small = BigInt(Math.floor(r() * 2000) - 1000);
    const bits = BigInt.asUintN(8 * size, small);
    for (let j = 0; j < size; j++) dv.setUint8(i * size + j, Number((bits >> BigInt(8 * j)) & 0xffn));
  }
  if (dataType === DataType.BOOL) for (let i = 0; i < n; i++) b[i] = b[i]! & 1;
  return b;
}

function allKinds(seed: number, n: number): BundleTensor[] {
  const r = rng(seed);
  const f32 = [...SPECIAL_F32, ...randomFloat32(r, n)];
  const f64 = [...SPECIAL_F64, ...randomFloat64(r, n)];
  const sixteen = () => new Uint8Array(Uint16Array.from({ length: n }, (_, i) => (i < 4 ? [0, 0xffff, 0x8000, 0x7c01][i]! : Math.floor(r() * 65536))).buffer);
  const ints = [DataType.INT64, DataType.INT32, DataType.INT16, DataType.INT8, DataType.UINT64, DataType.UINT32, DataType.UINT8, DataType.BOOL];
  // a misaligned float32 view: the writer must not assume its bytes start on a 4-byte boundary
  const shifted = new Uint8Array(4 * 37 + 1).subarray(1);
  shifted.set(u32(randomFloat32(r, 37)));
  return [
    tensor('conv.weight', DataType.FLOAT, u32(f32), [f32.length]),
    tensor('layer/1:scale', DataType.DOUBLE, u32(f64)),
    tensor('half', DataType.FLOAT16, sixteen()),
    tensor('brain.half', DataType.BFLOAT16, sixteen()),
    tensor('u16', DataType.UINT16, sixteen()),
    ...ints.map((dt) => tensor(`int.${dataTypeName(dt)}`, dt, intBytes(r, dt, Math.max(n, 40)))),
    tensor('empty', DataType.FLOAT, new Uint8Array(0), [0, 3]),
    tensor('one', DataType.INT8, Uint8Array.of(0x80)),
    tensor('shifted', DataType.FLOAT, shifted),
    tensor(`long ${'name '.repeat(40)}*/`, DataType.FLOAT, u32([0x3f800000, 0x80000000, 0x7fc00001])),
  ];
}

function sourceText(pieces: Iterable<Uint8Array>): string {
  const parts: Buffer[] = [];
  for (const p of pieces) {
    expect(p.byteLength).toBeGreaterThan(0);
    parts.push(Buffer.from(p)); // copied: a piece must stay as it was when the next is made
  }
  return Buffer.concat(parts).toString('latin1');
}

// ---- an independent reading of a hexadecimal floating literal ------------------------------------

/** The value a literal denotes (ISO C 6.4.4.2 for the hexadecimal form; NAN and INFINITY from <math.h>). */
function literalValue(lit: string, wide: boolean): number {
  const neg = lit.startsWith('-');
  const body = (neg ? lit.slice(1) : lit).replace(wide ? /$/ : /f$/, '');
  let v: number;
  if (body === 'NAN') return NaN;
  if (body === 'INFINITY') v = Infinity;
  else if (body === '0.0') v = 0;
  else {
    const m = /^0x([01])(?:\.([0-9a-f]+))?p([+-]\d+)$/.exec(body);
    if (!m) throw new Error(`not a hexadecimal floating literal: ${lit}`);
    const frac = m[2] ?? '';
    // exact: at most 53 significant bits, and the power of two scales without rounding for every value a float holds
    v = parseInt(m[1]! + frac, 16) * 2 ** (Number(m[3]) - 4 * frac.length);
  }
  return neg ? -v : v;
}

describe('C source writer: bytes identical to the one-string-per-element reference', () => {
  it('seeded tensors of every element type, in pieces of every size class, give the reference text', () => {
    for (const seed of [1, 2, 3]) {
      const tensors = allKinds(seed, 600 + seed * 37);
      const about = `graph 'g${seed}' from m${seed}.onnx ??/ */`;
      const want = refSource(tensors, about);
      // pieces smaller than a line, barely larger than one element, and many lines long; then the default size
      for (const chunk of [48, 49, 61, 100, 257, 4096]) {
        expect(sourceText(renderCSource(tensors, about, chunk).source)).toBe(want);
      }
      expect(sourceText(renderCSource(tensors, about).source)).toBe(want);
    }
  });

  it('a piece is at most the chunk size, except a block of fixed text longer than that, on its own', () => {
    const tensors = allKinds(5, 300);
    const pieces = [...renderCSource(tensors, 'about', 64).source].map((p) => Buffer.from(p).toString('latin1'));
    const long = pieces.filter((p) => p.length > 64);
    expect(long.some((p) => p.includes('long name'))).toBe(true);
    expect(long.some((p) => p.startsWith('/* weights.c:'))).toBe(true);
    for (const p of long) expect(p.startsWith('  ') || p.includes('\n  ')).toBe(false); // no element line
    expect(pieces.length).toBeGreaterThan(100);
  });

  it('float classes one at a time: each literal equals the reference and denotes the stored value', () => {
    const r = rng(9);
    const words = [...SPECIAL_F32, ...randomFloat32(r, 20000)];
    const t = tensor('f', DataType.FLOAT, u32(words));
    const text = sourceText(renderCSource([t], 'a', 1000).source);
    const lits = text.slice(text.indexOf('{\n') + 2, text.indexOf('};')).split(',').map((l) => l.trim()).filter(Boolean);
    expect(lits.length).toBe(words.length);
    const f = new Float32Array(u32(words).buffer);
    const seen = new Set<string>();
    lits.forEach((lit, i) => {
      expect(lit).toBe(refFloat32(words[i]!));
      const v = literalValue(lit, false);
      if (Number.isNaN(f[i]!)) expect(lit).toBe('NAN');
      else expect(Object.is(v, f[i]!)).toBe(true); // -0 included
      const e = (words[i]! >>> 23) & 0xff;
      seen.add(Number.isNaN(f[i]!) ? 'nan' : e === 0xff ? 'inf' : e === 0 ? (words[i]! & 0x7fffff ? 'subnormal' : 'zero') : 'normal');
    });
    expect([...seen].sort()).toEqual(['inf', 'nan', 'normal', 'subnormal', 'zero']);

    const w64 = [...SPECIAL_F64, ...randomFloat64(r, 20000)];
    const d = tensor('d', DataType.DOUBLE, u32(w64));
    const text64 = sourceText(renderCSource([d], 'a', 1000).source);
    const lits64 = text64.slice(text64.indexOf('{\n') + 2, text64.indexOf('};')).split(',').map((l) => l.trim()).filter(Boolean);
    const f64 = new Float64Array(u32(w64).buffer);
    expect(lits64.length).toBe(f64.length);
    lits64.forEach((lit, i) => {
      expect(lit).toBe(refFloat64(w64[2 * i + 1]!, w64[2 * i]!));
      if (Number.isNaN(f64[i]!)) expect(lit).toBe('NAN');
      else expect(Object.is(literalValue(lit, true), f64[i]!)).toBe(true);
    });
  });

  it('the same tensors give the same bytes whatever the piece size and however often rendered', () => {
    const tensors = allKinds(4, 500);
    const a = sourceText(renderCSource(tensors, 'x', 48).source);
    expect(sourceText(renderCSource([...tensors].reverse(), 'x', 1 << 20).source)).toBe(a);
  });

  it('refuses a piece size that cannot hold one element', () => {
    expect(() => [...renderCSource(allKinds(1, 10), 'x', 47).source]).toThrow(/cannot hold an element/);
  });
});
