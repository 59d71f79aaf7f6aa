import { afterAll, describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import onnxProto from 'onnx-proto';
import { exportBundle } from '../../src/jobs/export.js';
import { cIdentifiers, commentText } from '../../src/ship/c-source.js';
import { readModelFile } from '../../src/onnx/read.js';
import { bundleFixture, fnv1a64, type Expected } from './bundle-fixture.js';
import { GraphBuilder, modelBytes, rng, T } from '../helpers/build.js';

// The machine's C compiler is the outside check: it must accept the generated source under strict ISO C
// settings, and a program linked against it must see exactly the model's bytes.
function findCompiler(): string | undefined {
  for (const cc of ['cc', 'gcc', 'clang']) {
    try { execFileSync(cc, ['--version'], { stdio: 'ignore' }); return cc; } catch { /* try the next */ }
  }
  return undefined;
}
const CC = findCompiler();
function hasCxx(): boolean {
  try { execFileSync('c++', ['--version'], { stdio: 'ignore' }); return true; } catch { return false; }
}
if (!CC) console.warn('SKIPPED: no C compiler (cc, gcc or clang) on this machine, so the C bundle was not compiled');

const work = mkdtempSync(join(tmpdir(), 'pleat-bundle-c-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

// C keywords of C11 (ISO/IEC 9899:2011, 6.4.1), from memory
const KEYWORDS = new Set(('auto break case char const continue default do double else enum extern float for goto if inline int long ' +
  'register restrict return short signed sizeof static struct switch typedef union unsigned void volatile while _Alignas _Alignof ' +
  '_Atomic _Bool _Complex _Generic _Imaginary _Noreturn _Static_assert _Thread_local').split(' '));

const C_ELEMENT_SIZE: Record<number, number> = { 1: 4, 11: 8, 10: 2, 16: 2, 7: 8, 6: 4, 5: 2, 3: 1, 13: 8, 12: 4, 4: 2, 2: 1, 9: 1 };

function cc(args: string[], cwd: string): void {
  execFileSync(CC!, args, { cwd, stdio: ['ignore', 'pipe', 'pipe'] });
}

/** Compile weights.c strictly, then link a program that prints, per tensor, what the compiled array holds. */
function probe(dir: string, tensors: Array<{ name: string; symbol: string; isFloat: boolean }>): Map<string, { count: number; size: number; hash: bigint; align: number; rank: number; firsts: number[] }> {
  cc(['-std=c11', '-Wall', '-Wextra', '-pedantic', '-Werror', '-c', 'weights.c', '-o', 'weights_c11.o'], dir);
  cc(['-std=c99', '-Wall', '-Wextra', '-Werror', '-c', 'weights.c', '-o', 'weights_c99.o'], dir); // the GNU attribute path
  const lines = tensors.map(({ symbol, isFloat }) => {
    const M = symbol.toUpperCase();
    return `  report("${symbol}", ${symbol}, ${M}_COUNT, sizeof ${symbol}[0], ${M}_RANK, ${isFloat ? 1 : 0}, ` +
      `${M}_COUNT > 0 ? (double)${symbol}[0] : 0, ${M}_COUNT > 1 ? (double)${symbol}[1] : 0, ${M}_COUNT > 2 ? (double)${symbol}[2] : 0);`;
  });
  writeFileSync(join(dir, 'main.c'), `#include <stdio.h>
#include <stdint.h>
#include "weights.h"

/* FNV-1a, 64-bit, over the array's bytes in memory */
static uint64_t fnv(const void *p, size_t n) {
  const unsigned char *b = (const unsigned char *)p;
  uint64_t h = 14695981039346656037ULL;
  size_t i;
  for (i = 0; i < n; i++) { h ^= b[i]; h *= 1099511628211ULL; }
  return h;
}

static void report(const char *name, const void *p, size_t count, size_t size, int rank, int isfloat, double a, double b, double c) {
  printf("%s %zu %zu %llu %u %d", name, count, size, (unsigned long long)fnv(p, count * size), (unsigned)((uintptr_t)p % 16), rank);
  if (isfloat) printf(" %.17g %.17g %.17g", a, b, c);
  printf("\\n");
}

int main(void) {
  if (PLEAT_WEIGHT_TENSORS != ${tensors.length}) return 3;
${lines.join('\n')}
  return 0;
}
`);
  cc(['-std=c11', '-Wall', '-Wextra', '-pedantic', '-Werror', 'main.c', 'weights.c', '-o', 'probe'], dir);
  const out = execFileSync(join(dir, 'probe'), { encoding: 'utf8' });
  const bySymbol = new Map<string, { count: number; size: number; hash: bigint; align: number; rank: number; firsts: number[] }>();
  for (const line of out.trim().split('\n')) {
    const [sym, count, size, hash, align, rank, ...firsts] = line.split(' ');
    bySymbol.set(sym!, {
      count: Number(count), size: Number(size), hash: BigInt(hash!), align: Number(align), rank: Number(rank),
      firsts: firsts.map((v) => (v === 'nan' || v === '-nan' ? NaN : v === 'inf' ? Infinity : v === '-inf' ? -Infinity : Number(v))),
    });
  }
  return bySymbol;
}

/** Decode the first elements of a float32/float64 tensor from its expected bytes (DataView, little-endian). */
function firstFloats(e: Expected): number[] {
  const dv = new DataView(e.bytes.buffer, e.bytes.byteOffset, e.bytes.byteLength);
  const n = Math.min(3, e.bytes.byteLength / (e.type === 11 ? 8 : 4));
  return Array.from({ length: n }, (_, i) => (e.type === 11 ? dv.getFloat64(i * 8, true) : dv.getFloat32(i * 4, true)));
}

describe('C source bundle', () => {
  it('makes valid, unique, keyword-free identifiers independent of input order', () => {
    const names = ['conv.weight', 'conv_weight', 'Conv_Weight', '1x', 'int', 'for', '', 'a/b', 'a:b', 'größe', '_Bool', '__x', 'w_a_b_2', 'a-b_2'];
    const ids = cIdentifiers(names);
    const again = cIdentifiers([...names].reverse());
    expect([...again.entries()].sort()).toEqual([...ids.entries()].sort());
    const lower = new Set<string>();
    for (const [name, id] of ids) {
      expect(id, name).toMatch(/^[A-Za-z_][A-Za-z0-9_]*$/);
      expect(KEYWORDS.has(id), id).toBe(false);
      expect(id.startsWith('_'), id).toBe(false);
      expect(lower.has(id.toLowerCase()), `${id} clashes`).toBe(false);
      lower.add(id.toLowerCase());
    }
    // clean names claim their identifiers first (sorted, so 'Conv_Weight' before 'conv_weight'), cleaned ones after
    expect(ids.get('Conv_Weight')).toBe('w_Conv_Weight');
    expect(ids.get('conv_weight')).toBe('w_conv_weight_2');
    expect(ids.get('conv.weight')).toBe('w_conv_weight_3');
    expect(ids.get('int')).toBe('w_int');
    expect(ids.size).toBe(names.length);
  });

  it.skipIf(!CC)('compiles with -std=c11 -Wall -Wextra -pedantic -Werror, and a linked program sees every tensor bit for bit', () => {
    const fx = bundleFixture();
    const src = join(work, 'fixture.onnx');
    writeFileSync(src, fx.bytes);
    const dir = join(work, 'fixture-c');
    const res = exportBundle(readModelFile(src), dir, 'c');
    expect(res.files.map((f) => f.slice(dir.length + 1))).toEqual(['weights.h', 'weights.c', 'manifest.json']);
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    expect(m.format).toBe('c');
    const list = fx.expected.map((e) => ({ name: e.name, symbol: m.tensors[e.name].symbol as string, isFloat: e.type === 1 || e.type === 11 }));
    const seen = probe(dir, list);
    expect(seen.size).toBe(fx.expected.length);
    for (const e of fx.expected) {
      const got = seen.get(m.tensors[e.name].symbol)!;
      const count = e.dims.reduce((a, b) => a * b, 1);
      expect(got.count, e.name).toBe(count);
      expect(got.size, e.name).toBe(C_ELEMENT_SIZE[e.type]);
      expect(got.rank, e.name).toBe(e.dims.length);
      expect(got.align, `${e.name} is 16-byte aligned`).toBe(0);
      expect(got.hash, `${e.name}: compiled bytes differ from the model's`).toBe(fnv1a64(e.bytes));
      if ((e.type === 1 || e.type === 11) && count > 0) expect(got.firsts.slice(0, firstFloats(e).length), e.name).toEqual(firstFloats(e));
    }
    // the shape macros agree with the model
    const h = readFileSync(join(dir, 'weights.h'), 'utf8');
    expect(h).toContain(`#define ${m.tensors['stem.conv.weight'].symbol.toUpperCase()}_DIM0 4`);
    expect(h).toContain(`#define ${m.tensors['empty'].symbol.toUpperCase()}_COUNT 0`);
    expect(readdirSync(dir).filter((f) => f.endsWith('.tmp') || f.endsWith('.old'))).toEqual([]);
  });

  it.skipIf(!CC)('carries the demo tray-sorter model exactly (checked against onnx-proto\'s own decoding)', () => {
    const path = resolve(import.meta.dirname, '..', '..', 'models', 'tray-sorter.onnx');
    const proto = onnxProto.onnx.ModelProto.decode(readFileSync(path));
    const dir = join(work, 'sorter-c');
    exportBundle(readModelFile(path), dir, 'c');
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    const inits = proto.graph!.initializer!;
    const seen = probe(dir, inits.map((t) => ({ name: t.name!, symbol: m.tensors[t.name!].symbol, isFloat: true })));
    for (const t of inits) {
      const got = seen.get(m.tensors[t.name!].symbol)!;
      expect(got.hash, t.name!).toBe(fnv1a64(t.rawData!));
      expect(got.count).toBe(t.dims!.reduce((a: number, b) => a * Number(b), 1));
    }
    // a conv layer maps to its weight tensor and keeps its attributes
    const layer = m.layers.find((l: { name: string }) => l.name === 'ds1.dw');
    expect(layer).toMatchObject({ op: 'Conv', tensors: ['ds1.dw.weight'], attributes: { group: 32, kernel_shape: [3, 3], strides: [2, 2] } });
  });

  it.skipIf(!CC || !hasCxx())('links into a C++ program through the header (extern "C")', () => {
    const path = resolve(import.meta.dirname, '..', '..', 'models', 'pump-vibration.onnx');
    const dir = join(work, 'pump-cxx');
    exportBundle(readModelFile(path), dir, 'c');
    writeFileSync(join(dir, 'use.cpp'), `#include <cstdio>
#include "weights.h"
int main() { std::printf("%d %.9g\\n", (int)W_FC2_WEIGHT_COUNT, (double)w_fc2_weight[0]); return 0; }
`);
    cc(['-std=c11', '-Wall', '-Werror', '-c', 'weights.c', '-o', 'weights.o'], dir);
    execFileSync('c++', ['-std=c++11', '-Wall', '-Werror', 'use.cpp', 'weights.o', '-o', 'use'], { cwd: dir, stdio: ['ignore', 'pipe', 'pipe'] });
    const [count, first] = execFileSync(join(dir, 'use'), { encoding: 'utf8' }).trim().split(' ');
    const proto = onnxProto.onnx.ModelProto.decode(readFileSync(path));
    const w = proto.graph!.initializer!.find((t) => t.name === 'fc2.weight')!;
    expect(Number(count)).toBe(3 * 24);
    // %.9g prints enough digits to identify a float32 exactly (9 significant digits, IEEE 754 binary32)
    expect(Math.fround(Number(first))).toBe(new DataView(w.rawData!.buffer, w.rawData!.byteOffset).getFloat32(0, true));
  });

  it('comment text never opens or closes a comment, nor holds two question marks in a row (seeded strings)', () => {
    // C99 6.4.9: a comment starts with /* and ends at the first */; 5.2.1.1: ??/ is a trigraph (a backslash)
    const r = rng(23);
    const alphabet = ['/', '*', '?', 'a', '\\', ' ', '\n', 'é', '"'];
    for (let k = 0; k < 2000; k++) {
      const s = Array.from({ length: 1 + Math.floor(r() * 12) }, () => alphabet[Math.floor(r() * alphabet.length)]).join('');
      for (const quote of [true, false]) {
        const c = commentText(s, quote);
        expect(c, JSON.stringify(s)).not.toMatch(/\/\*|\*\/|\?\?|[^\x20-\x7e]/);
      }
    }
  });

  it.skipIf(!CC)('names, graph name and file name that would open or close a comment compile with -Wall -Wextra -pedantic -Werror', () => {
    const names = ['a/*b', '/*/', 'x*/y/*z', '???/', 'q??/', 'end/', '*start', '/**/'];
    const g = new GraphBuilder('graph/*name*/??/');
    g.input('x', [1]);
    let y = 'x';
    names.forEach((n, i) => { g.init(n, [1], [i + 0.5]); y = g.node('Add', [y, n], {}, { name: `add${i}/*` }); });
    g.output(y);
    const src = join(work, 'odd*name?.onnx');
    writeFileSync(src, modelBytes(g));
    const dir = join(work, 'comment-c');
    exportBundle(readModelFile(src), dir, 'c');
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    // (probe compiles weights.c and a program including weights.h under -Werror, and reads every array back)
    const seen = probe(dir, names.map((name) => ({ name, symbol: m.tensors[name].symbol as string, isFloat: true })));
    names.forEach((n, i) => expect(seen.get(m.tensors[n].symbol)!.firsts[0], n).toBe(i + 0.5));
  });

  it.skipIf(!CC)('a tensor longer than one rendered piece keeps every element bit for bit (seeded values)', () => {
    // 2 pieces of 65536 elements and a part line, in float32 and uint8: the pieces join into the same lines
    const r = rng(31);
    const n = 2 * 65536 + 13;
    const f = new Float32Array(n).map(() => (r() - 0.5) * 10 ** Math.floor(r() * 8 - 4));
    const u = new Uint8Array(70001).map(() => Math.floor(r() * 256));
    const g = new GraphBuilder('long');
    g.input('x', [1]);
    g.init('long.f32', [n], f);
    g.init('long.u8', [u.length], u, T.UINT8);
    g.output('x');
    const src = join(work, 'long.onnx');
    writeFileSync(src, modelBytes(g));
    const dir = join(work, 'long-c');
    exportBundle(readModelFile(src), dir, 'c');
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    const seen = probe(dir, [{ name: 'long.f32', symbol: m.tensors['long.f32'].symbol, isFloat: true }, { name: 'long.u8', symbol: m.tensors['long.u8'].symbol, isFloat: false }]);
    expect(seen.get(m.tensors['long.f32'].symbol)!.hash).toBe(fnv1a64(new Uint8Array(f.buffer)));
    expect(seen.get(m.tensors['long.u8'].symbol)!.hash).toBe(fnv1a64(u));
    // eight elements a line throughout, the last line partial
    const body = readFileSync(join(dir, 'weights.c'), 'utf8').split('\n');
    const first = body.findIndex((l) => l.includes(`${m.tensors['long.f32'].symbol}[${n}] = {`));
    const end = body.indexOf('};', first);
    expect(end - first - 1).toBe(Math.ceil(n / 8));
    expect(body.slice(first + 1, end - 1).every((l) => l.split(', ').length === 8)).toBe(true);
    expect(body[end - 1]!.split(', ').length).toBe(n % 8);
  });

  it('is deterministic: the same model gives the same files', () => {
    const path = resolve(import.meta.dirname, '..', '..', 'models', 'pump-vibration.onnx');
    exportBundle(readModelFile(path), join(work, 'det-a'), 'c');
    exportBundle(readModelFile(path), join(work, 'det-b'), 'c');
    for (const f of ['weights.h', 'weights.c', 'manifest.json']) {
      expect(readFileSync(join(work, 'det-a', f)).equals(readFileSync(join(work, 'det-b', f))), f).toBe(true);
    }
  });
});
