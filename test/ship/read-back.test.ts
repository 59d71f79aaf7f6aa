// The bundle read back (src/ship/read-back.ts): the staged files, read from disk, against the checked model. A
// clean bundle reports what it compared; a defect a writer could make (a flipped bit or digit, bytes swapped, a
// literal for another value, a tensor dropped, renamed or listed twice, offsets moved, a skipped constant left
// unsaid) is a BundleMismatch naming the tensor and the first differing element, and the export writes nothing.
// Defects are made by editing a clean bundle's files, or by the PLEAT_TAMPER_BUNDLE hook on the staged files.
// Expected values are computed here from the safetensors layout (format description, from memory: 8-byte
// little-endian header length, JSON header, data) and from IEEE 754 binary32 bit patterns written down by hand.
import { afterAll, afterEach, describe, expect, it } from 'vitest';
import { cpSync, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import '../../src/jobs/with-checks.js';
import { exportFile } from '../../src/jobs/export.js';
import { exportBundle } from '../../src/jobs/export.js';
import { BundleMismatch, duplicateKey, readBackBundle } from '../../src/ship/read-back.js';
import { readModelFile } from '../../src/onnx/read.js';
import { f, fs, GraphBuilder, modelBytes, rng, T } from '../helpers/build.js';
import { bundleFixture } from './bundle-fixture.js';

const MODEL = resolve(import.meta.dirname, '..', '..', 'models', 'pump-vibration.onnx');
const work = mkdtempSync(join(tmpdir(), 'pleat-read-back-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));
afterEach(() => { delete process.env.PLEAT_TAMPER_BUNDLE; });

const FILES = { safetensors: ['weights.safetensors', 'manifest.json'], c: ['weights.h', 'weights.c', 'manifest.json'] } as const;
const pathsIn = (dir: string, format: 'safetensors' | 'c') => new Map(FILES[format].map((n) => [n, join(dir, n)]));
const manifestOf = (dir: string) => JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));

/** The thrown error, which must be a BundleMismatch. */
function mismatch(fn: () => unknown): BundleMismatch {
  try { fn(); } catch (e) {
    expect(e).toBeInstanceOf(BundleMismatch); // (names may hold line breaks: the CLI shows them escaped)
    return e as BundleMismatch;
  }
  throw new Error('no mismatch was found');
}

/** Entries of the folder and of its parent that pleat's transaction would name (temporaries and records). */
const leftovers = (dir: string) => readdirSync(dir).filter((n) => n.startsWith('.pleat-'));

/** The byte offset in weights.safetensors of element k of a tensor, from the file's own header. */
function safetensorsOffset(dir: string, name: string, k: number, size: number): number {
  const b = readFileSync(join(dir, 'weights.safetensors'));
  const n = Number(b.readBigUInt64LE(0));
  const header = JSON.parse(b.subarray(8, 8 + n).toString('utf8'));
  return 8 + n + header[name].data_offsets[0] + k * size;
}

/** The byte offset in weights.c of the first fraction digit of element k of a float array, and the literal. */
function cLiteralOffset(dir: string, symbol: string, k: number): { at: number; literal: string } {
  const text = readFileSync(join(dir, 'weights.c'), 'latin1');
  const open = text.indexOf(` ${symbol}[`);
  let at = text.indexOf('{\n', open) + 2;
  for (let i = 0; i < k; i++) at = text.indexOf(',', at) + 1;
  while (text[at] === ' ' || text[at] === '\n') at++;
  const literal = text.slice(at, text.indexOf(',', at));
  return { at: text.indexOf('.', at) + 1, literal };
}

describe('bundle read back: a clean export says what it compared', { timeout: 120_000 }, () => {
  it.each(['safetensors', 'c'] as const)('%s: every listed tensor, its elements and bytes, passed', (format) => {
    const dir = join(work, `clean-${format}`);
    const r = exportFile(MODEL, dir, format, { probes: 1 });
    const m = manifestOf(dir);
    const listed = Object.values(m.tensors) as Array<{ count: number; bytes: number }>;
    expect(r.bundle!.readBack).toEqual({
      status: 'passed',
      tensors: listed.length,
      elements: listed.reduce((a, t) => a + t.count, 0),
      bytes: listed.reduce((a, t) => a + t.bytes, 0),
      fileBytes: FILES[format].reduce((a, n) => a + readFileSync(join(dir, n)).byteLength, 0), // each file once
    });
    expect(r.bundle!.readBack.bytes).toBe(r.bundle!.bytes);
    expect(listed.length).toBeGreaterThan(10);
  });

  it('the fixture of every element type and storage form reads back in both formats', () => {
    const src = join(work, 'fixture.onnx');
    const fx = bundleFixture();
    writeFileSync(src, fx.bytes);
    for (const format of ['safetensors', 'c'] as const) {
      const r = exportBundle(readModelFile(src), join(work, `fixture-${format}`), format);
      expect(r.readBack.status).toBe('passed');
      expect(r.readBack.tensors).toBe(fx.expected.length);
      expect(r.readBack.bytes).toBe(fx.expected.reduce((a, e) => a + e.bytes.byteLength, 0));
    }
  });

  it('a bundle with no tensor compared nothing: skipped, not passed', () => {
    const g = new GraphBuilder('bare');
    g.input('x', [2]);
    g.output(g.node('Relu', ['x']));
    const src = join(work, 'bare.onnx');
    writeFileSync(src, modelBytes(g));
    const r = exportBundle(readModelFile(src), join(work, 'bare-st'), 'safetensors');
    expect(r.readBack).toMatchObject({ status: 'skipped', tensors: 0, elements: 0, bytes: 0 });
  });
});

describe('bundle read back: a staged file changed before the read back (PLEAT_TAMPER_BUNDLE)', { timeout: 120_000 }, () => {
  it.each(['safetensors', 'c'] as const)('%s: one flipped bit or digit fails naming the tensor and element; nothing is left', (format) => {
    const clean = join(work, `ref-${format}`);
    exportFile(MODEL, clean, format, { probes: 1 });
    const m = manifestOf(clean);
    const name = 'c3.conv.weight';
    const k = 37;
    const at = format === 'safetensors' ? safetensorsOffset(clean, name, k, 4) : cLiteralOffset(clean, m.tensors[name].symbol, k).at;
    process.env.PLEAT_TAMPER_BUNDLE = `weights.${format === 'c' ? 'c' : 'safetensors'}:${at}`;
    // a new folder: not made
    const fresh = join(work, `tampered-${format}`);
    const e = mismatch(() => exportFile(MODEL, fresh, format, { probes: 1 }));
    expect(e.message).toMatch(new RegExp(`tensor '${name}' element ${k} \\[\\d+, \\d+, \\d+\\] is .* in weights\\.${format === 'c' ? 'c' : 'safetensors'} where the checked model has 0x[0-9a-f]{8}`));
    expect(existsSync(fresh)).toBe(false);
    expect(leftovers(work)).toEqual([]);
    // an existing bundle: left as it was
    const before = FILES[format].map((n) => readFileSync(join(clean, n)).toString('base64'));
    mismatch(() => exportFile(MODEL, clean, format, { probes: 1 }));
    expect(FILES[format].map((n) => readFileSync(join(clean, n)).toString('base64'))).toEqual(before);
    expect(leftovers(clean)).toEqual([]);
    // the same hook on the library's exportBundle
    const model = readModelFile(MODEL);
    const lib = join(work, `tampered-lib-${format}`);
    mkdirSync(lib);
    mismatch(() => exportBundle(model, lib, format));
    expect(readdirSync(lib)).toEqual([]);
    // ... into a new folder: not made either (it was made before the files were written, and stayed, empty)
    const libFresh = join(work, `tampered-lib-new-${format}`);
    mismatch(() => exportBundle(model, libFresh, format));
    expect(existsSync(libFresh)).toBe(false);
    expect(leftovers(work)).toEqual([]);
  });

  it('a digit of a data offset in the staged manifest: the manifest no longer places the tensor where the file has it', () => {
    const clean = join(work, 'ref-manifest');
    exportFile(MODEL, clean, 'safetensors', { probes: 1 });
    const text = readFileSync(join(clean, 'manifest.json'), 'latin1');
    const entry = text.indexOf('"c2.conv.weight": {');
    const offsets = text.indexOf('"data_offsets": [', entry) + '"data_offsets": ['.length;
    process.env.PLEAT_TAMPER_BUNDLE = `manifest.json:${text.indexOf(',', offsets) - 1}`; // the last digit of begin
    const e = mismatch(() => exportFile(MODEL, join(work, 'tampered-manifest'), 'safetensors', { probes: 1 }));
    expect(e.message).toMatch(/tensor 'c2\.conv\.weight': manifest\.json places it at "weights\.safetensors" \[\d+,\d+\]/);
  });
});

// The provenance a bundle carries (manifest.json's provenance, the safetensors metadata) was not read back: a
// changed digit of the source's SHA-256 shipped with exit 0.
describe('bundle read back: the provenance a bundle records', { timeout: 120_000 }, () => {
  it('a changed digit of the source digest in manifest.json or in the safetensors metadata is found; nothing is left', () => {
    const clean = join(work, 'ref-provenance');
    exportFile(MODEL, clean, 'safetensors', { probes: 1 });
    const sha = manifestOf(clean).provenance['pleat.source.sha256'] as string;
    expect(sha).toMatch(/^[0-9a-f]{64}$/);
    const at = (file: string) => readFileSync(join(clean, file), 'latin1').indexOf(sha) + 1;
    for (const file of ['manifest.json', 'weights.safetensors']) {
      process.env.PLEAT_TAMPER_BUNDLE = `${file}:${at(file)}`;
      const fresh = join(work, `tampered-provenance-${file}`);
      const e = mismatch(() => exportFile(MODEL, fresh, 'safetensors', { probes: 1 }));
      const what = file === 'manifest.json' ? "manifest.json's provenance" : "weights.safetensors's metadata";
      expect(e.message).toContain(`${what} says pleat.source.sha256 is "${sha[0]}`);
      expect(e.message).toContain(`where the checked model records "${sha}"`);
      expect(existsSync(fresh)).toBe(false);
    }
    delete process.env.PLEAT_TAMPER_BUNDLE;
    expect(leftovers(work)).toEqual([]);
  });
});

describe('bundle read back: defects a writer could make', { timeout: 120_000 }, () => {
  const src = join(work, 'fixture-defects.onnx');
  writeFileSync(src, bundleFixture().bytes);
  const model = readModelFile(src);
  const fresh = (format: 'safetensors' | 'c', tag: string) => {
    const dir = join(work, `defect-${format}-${tag}`);
    cpSync(join(work, `defect-${format}`), dir, { recursive: true });
    return dir;
  };
  exportBundle(model, join(work, 'defect-safetensors'), 'safetensors');
  exportBundle(model, join(work, 'defect-c'), 'c');

  it('safetensors: bytes of an element in the other order', () => {
    const dir = fresh('safetensors', 'order');
    const at = safetensorsOffset(dir, 'stem.conv.weight', 8, 4); // element 8 is 0.1f, 0x3dcccccd
    const b = readFileSync(join(dir, 'weights.safetensors'));
    b.subarray(at, at + 4).reverse();
    writeFileSync(join(dir, 'weights.safetensors'), b);
    const e = mismatch(() => readBackBundle(model, 'safetensors', pathsIn(dir, 'safetensors')));
    expect(e.message).toContain("tensor 'stem.conv.weight' element 8 [0, 0, 2, 2] is 0xcdcccc3d in weights.safetensors where the checked model has 0x3dcccccd");
  });

  it('safetensors: a float16 element stored as other half bits', () => {
    const dir = fresh('safetensors', 'half');
    const m = manifestOf(dir);
    const name = Object.keys(m.tensors).find((n) => m.tensors[n].dtype === 'float16')!;
    const at = safetensorsOffset(dir, name, 0, 2);
    const b = readFileSync(join(dir, 'weights.safetensors'));
    b[at + 1] = b[at + 1]! ^ 0x80; // the sign bit of the half
    writeFileSync(join(dir, 'weights.safetensors'), b);
    const e = mismatch(() => readBackBundle(model, 'safetensors', pathsIn(dir, 'safetensors')));
    expect(e.message).toMatch(new RegExp(`tensor '${name.replace(/\./g, '\\.')}' element 0 .* is 0x[0-9a-f]{4} in weights\\.safetensors where the checked model has 0x[0-9a-f]{4}`));
  });

  it('a tensor dropped, renamed or listed twice; offsets swapped; a skipped constant left unsaid', () => {
    const edit = (tag: string, file: string, change: (s: string) => string) => {
      const dir = fresh(tag.startsWith('c-') ? 'c' : 'safetensors', tag);
      writeFileSync(join(dir, file), change(readFileSync(join(dir, file), 'latin1')), 'latin1');
      return dir;
    };
    const st = (dir: string) => () => readBackBundle(model, 'safetensors', pathsIn(dir, 'safetensors'));
    const c = (dir: string) => () => readBackBundle(model, 'c', pathsIn(dir, 'c'));
    // dropped from the manifest
    const dropped = edit('dropped', 'manifest.json', (s) => {
      const j = JSON.parse(s); delete j.tensors['stem.conv.bias']; return JSON.stringify(j);
    });
    expect(mismatch(st(dropped)).message).toContain("tensor 'stem.conv.bias' of the checked model is not in the bundle and not listed as skipped");
    // renamed in the safetensors header (same length, so the header length still holds)
    const renamed = edit('renamed', 'weights.safetensors', (s) => s.replace('"stem.conv.bias"', '"stem.conv.bia$"'));
    expect(mismatch(st(renamed)).message).toMatch(/weights\.safetensors holds tensor 'stem\.conv\.bia\$', which manifest\.json does not list/);
    // listed twice in the manifest (JSON.parse would keep one silently)
    const twice = edit('twice', 'manifest.json', (s) => s.replace('"tensors": {', '"tensors": {\n    "stem.conv.bias": {},'));
    expect(mismatch(st(twice)).message).toContain('manifest.json lists "stem.conv.bias" twice');
    // two tensors of one size trade places in both the header and the manifest (each consistent with the other):
    // only the bytes under each name can tell
    const swapped = fresh('safetensors', 'swapped');
    const file = readFileSync(join(swapped, 'weights.safetensors'));
    const n = Number(file.readBigUInt64LE(0));
    const h = JSON.parse(file.subarray(8, 8 + n).toString('utf8'));
    const span = (k: string) => h[k].data_offsets[1] - h[k].data_offsets[0];
    const names = Object.keys(h).filter((k) => k !== '__metadata__' && h[k].dtype === 'F32');
    const pair = names.flatMap((a) => names.filter((b) => a < b && span(a) === span(b) && span(a) > 0).map((b) => [a, b] as const))[0]!;
    expect(pair).toBeDefined();
    [h[pair[0]].data_offsets, h[pair[1]].data_offsets] = [h[pair[1]].data_offsets, h[pair[0]].data_offsets];
    const head = Buffer.from(JSON.stringify(h).padEnd(Math.ceil(JSON.stringify(h).length / 8) * 8, ' '));
    const len = Buffer.alloc(8);
    len.writeBigUInt64LE(BigInt(head.byteLength));
    writeFileSync(join(swapped, 'weights.safetensors'), Buffer.concat([len, head, file.subarray(8 + n)]));
    const sm = manifestOf(swapped);
    sm.tensors[pair[0]].data_offsets = h[pair[0]].data_offsets;
    sm.tensors[pair[1]].data_offsets = h[pair[1]].data_offsets;
    writeFileSync(join(swapped, 'manifest.json'), JSON.stringify(sm));
    const said = mismatch(st(swapped)).message;
    expect(pair.some((name) => said.includes(`tensor '${name}' element `))).toBe(true);
    expect(said).toContain('in weights.safetensors where the checked model has');
    // a skipped constant left out of the manifest's skipped list
    const unsaid = edit('unsaid', 'manifest.json', (s) => {
      const j = JSON.parse(s); j.skipped.pop(); return JSON.stringify(j);
    });
    expect(mismatch(st(unsaid)).message).toMatch(/manifest\.json lists '.*' as skipped \(.*\) 0 times where the checked model has 1 such constants/);
    // C: an array missing from weights.c, and one declared with another length in weights.h
    const m = manifestOf(join(work, 'defect-c'));
    const sym = m.tensors['stem.conv.bias'].symbol as string;
    const gone = edit('c-gone', 'weights.c', (s) => s.replace(` ${sym}[`, ` ${sym}_x[`));
    expect(mismatch(c(gone)).message).toContain(`weights.c defines ${sym}_x, which manifest.json does not list`);
    const shorter = edit('c-short', 'weights.h', (s) => s.replace(`${sym}[4];`, `${sym}[3];`));
    expect(mismatch(c(shorter)).message).toContain(`weights.h declares float ${sym}[3]`);
  });
});

// A Constant whose value is a plain attribute (value_floats, value_ints, ...) is carried by its layer's attributes
// in manifest.json; the read back only checked that the attribute was there, so a wrong value shipped with exit 0,
// and the manifest wrote a -0 among such floats as 0.
describe('bundle read back: Constants carried by their layer in manifest.json', { timeout: 120_000 }, () => {
  const g = new GraphBuilder();
  g.input('x', [4]).output('y', [4]);
  g.node('Constant', [], { value_floats: fs([1.5, -0, 1e-45, 3.4028234663852886e38]) }, { name: 'cf', outputs: ['cf'] });
  g.node('Constant', [], { value_ints: [7, -4, 0, 9] }, { name: 'ci', outputs: ['ci'] });
  g.node('Constant', [], { value_float: f(-0) }, { name: 'c1', outputs: ['c1'] });
  g.node('Mul', ['x', 'cf'], {}, { outputs: ['m'] });
  g.node('Cast', ['ci'], { to: T.FLOAT }, { outputs: ['cc'] });
  g.node('Add', ['m', 'cc'], {}, { outputs: ['a'] });
  g.node('Add', ['a', 'c1'], {}, { outputs: ['y'] });
  const src = join(work, 'inline-constants.onnx');
  writeFileSync(src, modelBytes(g));
  const model = readModelFile(src);

  it('a clean export of either format reads back, -0 kept as -0.0 in manifest.json', () => {
    for (const format of ['safetensors', 'c'] as const) {
      const dir = join(work, `inline-${format}`);
      exportBundle(model, dir, format);
      const text = readFileSync(join(dir, 'manifest.json'), 'utf8');
      expect(text).toContain('"value_floats": [1.5, -0.0, 1e-45, 3.4028235e+38]');
      expect(text).toContain('"value_float": -0.0');
      expect(Object.is(JSON.parse(text).layers[2].attributes.value_float, -0)).toBe(true);
      expect(readBackBundle(model, format, pathsIn(dir, format)).status).toBe('skipped'); // (no bundle tensor)
    }
  });

  it('a changed value in a layer is found, naming the Constant and the element', () => {
    const dir = join(work, 'inline-safetensors');
    const text = readFileSync(join(dir, 'manifest.json'), 'utf8');
    const cases: Array<[string, string, string]> = [
      ['[1.5, -0.0, 1e-45', '[1.25, -0.0, 1e-45', "Constant 'cf': its value_floats element 0 is 1.25 where the checked model has 1.5"],
      ['[1.5, -0.0, 1e-45', '[1.5, 0.0, 1e-45', "Constant 'cf': its value_floats element 1 is 0 where the checked model has -0"],
      ['1e-45, 3.4028235e+38]', '1e-45]', "Constant 'cf': its value_floats is [1.5,0,1e-45], not a list of the checked model's 4 values"],
      ['[7, -4, 0, 9]', '[7, -4, 0, 8]', "Constant 'ci': its value_ints element 3 is 8 where the checked model has 9"],
      ['"value_float": -0.0', '"value_float": 0', "Constant 'c1': its value_float is 0 where the checked model has -0"],
    ];
    for (const [from, to, said] of cases) {
      expect(text).toContain(from);
      writeFileSync(join(dir, 'manifest.json'), text.replace(from, to));
      expect(mismatch(() => readBackBundle(model, 'safetensors', pathsIn(dir, 'safetensors'))).message).toContain(said);
    }
    writeFileSync(join(dir, 'manifest.json'), text);
  });
});

// The manifest's tensors were gathered in a plain object, where assigning the key __proto__ sets the prototype: a
// weight of that name was left out of manifest.json (exit 0 before the read back, an internal error since).
describe('bundle read back: a weight named __proto__', { timeout: 120_000 }, () => {
  it('is listed in manifest.json and reads back in both formats', () => {
    const g = new GraphBuilder();
    g.input('x', [2]).output('y', [2]);
    g.init('__proto__', [2], [1.5, -2.5]);
    g.node('Add', ['x', '__proto__'], {}, { outputs: ['y'] });
    const src = join(work, 'proto.onnx');
    writeFileSync(src, modelBytes(g));
    const model = readModelFile(src);
    for (const format of ['safetensors', 'c'] as const) {
      const dir = join(work, `proto-${format}`);
      exportBundle(model, dir, format);
      const listed = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8')).tensors;
      expect(Object.keys(listed)).toEqual(['__proto__']);
      expect(listed.__proto__.shape).toEqual([2]);
      expect(readBackBundle(model, format, pathsIn(dir, format))).toMatchObject({ status: 'passed', tensors: 1, elements: 2 });
    }
  });
});

describe('bundle read back: C literals of special float32 values are parsed exactly', { timeout: 120_000 }, () => {
  // IEEE 754 binary32 patterns (written by hand) and the literal the generator writes for each (weights.h: NAN keeps
  // no payload, so a NaN element matches NAN whatever its payload bits)
  const CASES: Array<[number, string]> = [
    [0x80000000, '-0.0f'], [0x00000000, '0.0f'], [0x00000001, '0x0.000002p-126f'], [0x007fffff, '0x0.fffffep-126f'],
    [0x00800000, '0x1p-126f'], [0x7f7fffff, '0x1.fffffep+127f'], [0xff7fffff, '-0x1.fffffep+127f'], [0x7f800000, 'INFINITY'],
    [0xff800000, '-INFINITY'], [0x7fc00000, 'NAN'], [0x7f800001, 'NAN'], [0xffc00123, 'NAN'], [0x3dcccccd, '0x1.99999ap-4f'],
    [0x3f800000, '0x1p+0f'], [0xbf800001, '-0x1.000002p+0f'],
  ];
  const g = new GraphBuilder('special');
  g.input('x', [1]);
  // raw bytes as they are (a Float32Array of numbers could make every NaN the canonical one)
  g.inits.push({ name: 'special', dims: [CASES.length], dataType: T.FLOAT, rawData: new Uint8Array(new Uint32Array(CASES.map(([b]) => b)).buffer) });
  g.output('x');
  const src = join(work, 'special.onnx');
  writeFileSync(src, modelBytes(g));
  const model = readModelFile(src);
  const dir = join(work, 'special-c');
  exportBundle(model, dir, 'c');
  const sym = manifestOf(dir).tensors.special.symbol as string;
  const body = readFileSync(join(dir, 'weights.c'), 'latin1');
  const literals = () => body.slice(body.indexOf('{\n', body.indexOf(` ${sym}[`)) + 2, body.indexOf('};', body.indexOf(` ${sym}[`))).split(',').map((l) => l.trim()).filter(Boolean);

  it('the generator writes the literal expected for each and the read back accepts every one', () => {
    expect(literals()).toEqual(CASES.map(([, l]) => l));
    expect(readBackBundle(model, 'c', pathsIn(dir, 'c')).elements).toBe(CASES.length);
  });

  // each literal replaced by its neighbour value (the sign of zero, one unit in the last place, the other
  // infinity, a number for NaN) or by a literal with more bits than a float holds: the read back must refuse it
  const WRONG: Array<[number, string]> = [
    [0, '0.0f'], [1, '-0.0f'], [2, '0x0.000004p-126f'], [3, '0x0.fffffcp-126f'], [4, '0x1.000002p-126f'],
    [5, '0x1.fffffcp+127f'], [6, '0x1.fffffep+127f'], [7, '-INFINITY'], [8, 'INFINITY'], [9, '0x1p+0f'],
    [12, '0x1.999998p-4f'], [12, '0x1.99999a1p-4f'], [13, '0x1p+1f'], [14, '-0x1.000003p+0f'],
  ];
  it.each(WRONG)('element %i written as %s is refused', (i, wrong) => {
    const copy = join(work, `special-c-${i}-${wrong.replace(/[^\w]/g, '_')}`);
    cpSync(dir, copy, { recursive: true });
    const parts = literals();
    parts[i] = wrong;
    const start = body.indexOf('{\n', body.indexOf(` ${sym}[`)) + 2;
    const end = body.indexOf('};', start);
    const lines: string[] = [];
    for (let k = 0; k < parts.length; k += 8) lines.push(`  ${parts.slice(k, k + 8).join(', ')},\n`);
    writeFileSync(join(copy, 'weights.c'), body.slice(0, start) + lines.join('') + body.slice(end), 'latin1');
    const e = mismatch(() => readBackBundle(model, 'c', pathsIn(copy, 'c')));
    expect(e.message).toContain(`tensor 'special' element ${i} [${i}] is '${wrong}'`);
  });

  it('seeded random float32 bit patterns of every class read back from C, and any one changed digit is found', () => {
    const r = rng(7);
    const n = 5000;
    const bits = new Uint32Array(n).map(() => (Math.floor(r() * 2 ** 32)) >>> 0);
    for (let i = 0; i < n; i += 50) bits[i] = (bits[i]! & 0x807fffff) >>> 0; // subnormals and zeros
    for (let i = 25; i < n; i += 50) bits[i] = (bits[i]! | 0x7f800000) >>> 0; // NaNs and infinities
    const gb = new GraphBuilder('random');
    gb.input('x', [1]);
    gb.inits.push({ name: 'random', dims: [n], dataType: T.FLOAT, rawData: new Uint8Array(bits.buffer) });
    gb.init('random.f64', [64], new Float64Array(64).map(() => (r() - 0.5) * 2 ** Math.floor(r() * 2000 - 1000)), T.DOUBLE);
    gb.output('x');
    const rs = join(work, 'random.onnx');
    writeFileSync(rs, modelBytes(gb));
    const m = readModelFile(rs);
    const rd = join(work, 'random-c');
    expect(exportBundle(m, rd, 'c').readBack.elements).toBe(n + 64);
    const symbol = manifestOf(rd).tensors.random.symbol as string;
    for (const k of [3, 777, 4099]) {
      const { at, literal } = cLiteralOffset(rd, symbol, k);
      if (!literal.includes('.')) continue;
      process.env.PLEAT_TAMPER_BUNDLE = `weights.c:${at}`;
      const e = mismatch(() => exportBundle(m, join(work, `random-c-${k}`), 'c'));
      expect(e.message).toContain(`tensor 'random' element ${k} [${k}]`);
    }
  });
});

describe('duplicateKey', () => {
  it('finds a key given twice in one object, at any depth, and not across objects or in strings', () => {
    expect(duplicateKey('{"a":1,"b":{"a":2}}')).toBeUndefined();
    expect(duplicateKey('{"a":1,"b":2,"a":3}')).toBe('a');
    expect(duplicateKey('{"x":[{"k":1},{"k":2}],"y":{"k":"\\"k\\"","k":0}}')).toBe('k');
    expect(duplicateKey('{"s":"a\\",\\"s","t":["s","s"]}')).toBeUndefined();
  });
});
