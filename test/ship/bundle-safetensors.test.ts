import { afterAll, describe, expect, it } from 'vitest';
import { existsSync, lstatSync, mkdtempSync, readFileSync, readdirSync, rmSync, writeFileSync, mkdirSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import onnxProto from 'onnx-proto';
import { exportBundle } from '../../src/jobs/export.js';
import { parseModel, readModelFile } from '../../src/onnx/read.js';
import { PleatError } from '../../src/errors.js';
import { foldModel } from '../../src/fold/index.js';
import { serializeModel } from '../../src/onnx/write.js';
import { bundleFixture } from './bundle-fixture.js';
import { GraphBuilder, modelBytes, f, fs } from '../helpers/build.js';
import { refusedWith } from '../helpers/refused.js';

// ---------------------------------------------------------------------------------------------------
// A safetensors reader written from the published format description: the "Format" section of the
// safetensors project's README (github.com/huggingface/safetensors; recalled from memory, not fetched here):
//   - 8 bytes: N, an unsigned little-endian 64-bit integer, the size of the header
//   - N bytes: a UTF-8 JSON string, starting with '{', which may be trailing-padded with spaces (0x20);
//     {"TENSOR_NAME": {"dtype": "F16", "shape": [1, 16, 256], "data_offsets": [BEGIN, END]}, ...}
//     plus an optional "__metadata__" object of string to string
//   - the rest: the byte buffer; offsets are relative to its start; the tensors must cover it entirely,
//     with no holes and no overlaps; data little-endian, row-major.
// It deliberately shares no code with src/ship/safetensors.ts.
// ---------------------------------------------------------------------------------------------------
const DTYPE_SIZE: Record<string, number> = {
  BOOL: 1, U8: 1, I8: 1, F8_E5M2: 1, F8_E4M3: 1, I16: 2, U16: 2, F16: 2, BF16: 2,
  I32: 4, U32: 4, F32: 4, F64: 8, I64: 8, U64: 8,
};

interface ReadTensor { dtype: string; shape: number[]; offsets: [number, number]; data: Uint8Array }

function readSafetensors(file: Uint8Array): { tensors: Map<string, ReadTensor>; metadata?: Record<string, string>; headerText: string } {
  if (file.byteLength < 8) throw new Error('shorter than the 8-byte length prefix');
  const n = new DataView(file.buffer, file.byteOffset, 8).getBigUint64(0, true);
  if (n > BigInt(file.byteLength - 8)) throw new Error(`header length ${n} runs past the end of the file`);
  const headerBytes = file.subarray(8, 8 + Number(n));
  const headerText = new TextDecoder('utf-8', { fatal: true }).decode(headerBytes);
  if (!headerText.startsWith('{')) throw new Error('header does not start with {');
  const header = JSON.parse(headerText) as Record<string, unknown>;
  const buffer = file.subarray(8 + Number(n));
  let metadata: Record<string, string> | undefined;
  const spans: Array<[number, number, string]> = [];
  const tensors = new Map<string, ReadTensor>();
  for (const [name, info] of Object.entries(header)) {
    if (name === '__metadata__') {
      metadata = info as Record<string, string>;
      for (const v of Object.values(metadata)) if (typeof v !== 'string') throw new Error('__metadata__ values must be strings');
      continue;
    }
    const { dtype, shape, data_offsets: offsets } = info as { dtype: string; shape: number[]; data_offsets: [number, number] };
    const size = DTYPE_SIZE[dtype];
    if (size === undefined) throw new Error(`${name}: unknown dtype ${dtype}`);
    if (!Array.isArray(shape) || !shape.every((d) => Number.isInteger(d) && d >= 0)) throw new Error(`${name}: bad shape`);
    const [begin, end] = offsets;
    if (!(Number.isInteger(begin) && Number.isInteger(end) && begin <= end && end <= buffer.byteLength)) throw new Error(`${name}: bad offsets`);
    if (end - begin !== shape.reduce((a, b) => a * b, 1) * size) throw new Error(`${name}: offsets do not match dtype and shape`);
    spans.push([begin, end, name]);
    tensors.set(name, { dtype, shape, offsets: [begin, end], data: buffer.subarray(begin, end) });
  }
  spans.sort((a, b) => a[0] - b[0] || a[1] - b[1]);
  let at = 0;
  for (const [begin, end, name] of spans) {
    if (begin !== at) throw new Error(`${name}: hole or overlap at byte ${at}`);
    at = end;
  }
  if (at !== buffer.byteLength) throw new Error('the byte buffer is not entirely indexed');
  return { tensors, metadata, headerText };
}

const ONNX_TO_ST: Record<number, string> = { 1: 'F32', 11: 'F64', 10: 'F16', 16: 'BF16', 7: 'I64', 6: 'I32', 5: 'I16', 3: 'I8', 13: 'U64', 12: 'U32', 4: 'U16', 2: 'U8', 9: 'BOOL' };

const work = mkdtempSync(join(tmpdir(), 'pleat-bundle-st-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

function fixtureModelPath(): string {
  const path = join(work, 'fixture.onnx');
  if (!existsSync(path)) writeFileSync(path, bundleFixture().bytes);
  return path;
}

describe('safetensors bundle', () => {
  it('the reader itself rejects what the format forbids', () => {
    const good = (json: string, data: number[]) => {
      const h = new TextEncoder().encode(json);
      const out = new Uint8Array(8 + h.byteLength + data.length);
      new DataView(out.buffer).setBigUint64(0, BigInt(h.byteLength), true);
      out.set(h, 8); out.set(data, 8 + h.byteLength);
      return out;
    };
    expect(readSafetensors(good('{"a":{"dtype":"U8","shape":[2],"data_offsets":[0,2]}}', [1, 2])).tensors.get('a')!.data).toEqual(new Uint8Array([1, 2]));
    expect(() => readSafetensors(good('{"a":{"dtype":"U8","shape":[2],"data_offsets":[0,2]}}', [1, 2, 3]))).toThrow(/entirely indexed/);
    expect(() => readSafetensors(good('{"a":{"dtype":"U8","shape":[1],"data_offsets":[1,2]}}', [1, 2]))).toThrow(/hole/);
    expect(() => readSafetensors(good('{"a":{"dtype":"F32","shape":[1],"data_offsets":[0,2]}}', [1, 2]))).toThrow(/do not match/);
    expect(() => readSafetensors(good(' {}', []))).toThrow(/start with/);
  });

  it('holds every tensor of the model byte for byte, with the right dtype and shape', () => {
    const fx = bundleFixture();
    const model = readModelFile(fixtureModelPath());
    const dir = join(work, 'fixture-st');
    const res = exportBundle(model, dir, 'safetensors');
    expect(res.files.map((f) => f.slice(dir.length + 1))).toEqual(['weights.safetensors', 'manifest.json']);
    const { tensors, metadata, headerText } = readSafetensors(readFileSync(join(dir, 'weights.safetensors')));
    expect([...tensors.keys()].sort()).toEqual(fx.expected.map((e) => e.name).sort());
    for (const e of fx.expected) {
      const t = tensors.get(e.name)!;
      expect(t.dtype, e.name).toBe(ONNX_TO_ST[e.type]);
      expect(t.shape, e.name).toEqual(e.dims);
      expect(Buffer.from(t.data).equals(Buffer.from(e.bytes)), `${e.name} bytes`).toBe(true);
    }
    expect(res.tensors).toBe(fx.expected.length);
    expect(res.bytes).toBe(fx.expected.reduce((a, e) => a + e.bytes.byteLength, 0));
    expect(res.skipped.map((s) => [s.name, s.reason])).toEqual(fx.skipped);
    expect(metadata).toEqual({ graph: 'bundle_fixture', manifest: 'manifest.json', producer: 'pleat' });
    // header padded with spaces so the data starts 8-aligned; keys sorted
    expect((8 + Buffer.byteLength(headerText)) % 8).toBe(0);
    const keys = Object.keys(JSON.parse(headerText));
    expect(keys).toEqual([...keys].sort());
  });

  it('matches the tensors of the demo model as onnx-proto decodes them (an independent decoder)', () => {
    const path = resolve(import.meta.dirname, '..', '..', 'models', 'tray-sorter.onnx');
    const proto = onnxProto.onnx.ModelProto.decode(readFileSync(path));
    const dir = join(work, 'sorter-st');
    exportBundle(readModelFile(path), dir, 'safetensors');
    const { tensors } = readSafetensors(readFileSync(join(dir, 'weights.safetensors')));
    expect(tensors.size).toBe(proto.graph!.initializer!.length);
    for (const init of proto.graph!.initializer!) {
      const t = tensors.get(init.name!)!;
      expect(t.dtype).toBe('F32');
      expect(t.shape).toEqual(init.dims!.map(Number));
      expect(Buffer.from(t.data).equals(Buffer.from(init.rawData!)), init.name!).toBe(true);
    }
  });

  it('holds the folded weights when given a folded model (the `pleat export --bundle` path)', () => {
    const path = resolve(import.meta.dirname, '..', '..', 'models', 'pump-vibration.onnx');
    const { model } = foldModel(readModelFile(path));
    const proto = onnxProto.onnx.ModelProto.decode(serializeModel(model)); // decoded by onnx-proto, not by pleat
    const dir = join(work, 'pump-folded');
    exportBundle(model, dir, 'safetensors');
    const { tensors } = readSafetensors(readFileSync(join(dir, 'weights.safetensors')));
    const inits = proto.graph!.initializer!;
    expect([...tensors.keys()].sort()).toEqual(inits.map((t) => t.name!).sort());
    for (const t of inits) {
      const bytes = t.rawData?.length ? t.rawData : new Uint8Array(new Float32Array(t.floatData!).buffer);
      expect(Buffer.from(tensors.get(t.name!)!.data).equals(Buffer.from(bytes)), t.name!).toBe(true);
    }
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    expect(m.layers.map((l: { op: string }) => l.op)).not.toContain('BatchNormalization');
  });

  it('writes a manifest that maps each layer to its attributes, inputs, outputs and tensors', () => {
    const dir = join(work, 'fixture-manifest');
    exportBundle(readModelFile(fixtureModelPath()), dir, 'safetensors');
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    const { tensors: st } = readSafetensors(readFileSync(join(dir, 'weights.safetensors')));
    expect(m.format).toBe('safetensors');
    expect(m.files).toEqual(['weights.safetensors']);
    expect(m.layers.map((l: { op: string }) => l.op)).toEqual(['Conv', 'Constant', 'Mul', 'If']);
    const conv = m.layers[0];
    expect(conv).toMatchObject({
      index: 0, name: 'stem.conv', op: 'Conv', inputs: ['x', 'stem.conv.weight', 'stem.conv.bias'],
      outputs: ['stem.conv_out'], tensors: ['stem.conv.weight', 'stem.conv.bias'],
      attributes: { kernel_shape: [3, 3], pads: [1, 1, 1, 1] },
    });
    expect(m.layers[1]).toMatchObject({ op: 'Constant', tensors: ['const.scale'], attributes: { value: { tensor: 'const.scale' } } });
    expect(m.layers[3].attributes.then_branch).toEqual({ graph: 'then_body', nodes: 1 });
    // manifest offsets agree with the file
    for (const [name, info] of Object.entries(m.tensors as Record<string, { data_offsets: number[]; bytes: number; shape: number[] }>)) {
      expect(st.has(name), name).toBe(true);
      expect(info.data_offsets, name).toEqual(st.get(name)!.offsets);
      expect(info.bytes, name).toBe(st.get(name)!.data.byteLength);
      expect(info.shape).toEqual(st.get(name)!.shape);
    }
    expect(m.tensors['stem.conv.bias'].overridable).toBe(true);
    expect(m.tensors['stem.conv.weight'].overridable).toBeUndefined();
    expect(m.model.inputs.find((v: { name: string }) => v.name === 'stem.conv.bias').has_default).toBe(true);
    expect(m.skipped.map((s: { name: string }) => s.name)).toEqual(['labels', 'then.w']);
  });

  it('turns attribute values into plain JSON: float32 as its shortest exact decimal, non-finite as strings', () => {
    const g = new GraphBuilder('attrs');
    g.input('x', [2]);
    g.node('LeakyRelu', ['x'], { alpha: f(Infinity) }, { name: 'odd', outputs: ['a'] });
    g.node('Custom', ['a'], { gains: fs([1.5, NaN, -Infinity, 0.001]), label: 'tray', labels: [7, 8] }, { name: 'custom', outputs: ['y'], domain: 'bakery.ops' });
    g.output('y');
    const dir = join(work, 'attrs');
    exportBundle(parseModel(modelBytes(g, { extraOpsets: [['bakery.ops', 1]] }), work), dir, 'safetensors');
    const m = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8'));
    expect(m.layers[0].attributes).toEqual({ alpha: 'Infinity' });
    expect(m.layers[1]).toMatchObject({ domain: 'bakery.ops', attributes: { gains: [1.5, 'NaN', '-Infinity', 0.001], label: 'tray', labels: [7, 8] } });
    const { tensors } = readSafetensors(readFileSync(join(dir, 'weights.safetensors')));
    expect(tensors.size).toBe(0); // no weights: an empty but valid file
  });

  // The header's __metadata__ key holds string metadata only: a tensor of that name made a file loaders refuse,
  // and pleat's own metadata was lost under it (exit 0).
  it("refuses a tensor named '__metadata__' before writing anything", () => {
    const g = new GraphBuilder('reserved');
    g.input('x', [3]);
    g.init('__metadata__', [3], [1, 2, 3]);
    g.node('Mul', ['x', '__metadata__'], {}, { name: 'mul', outputs: ['y'] });
    g.output('y');
    const dir = join(work, 'reserved');
    expectPleat(() => exportBundle(parseModel(modelBytes(g), work), dir, 'safetensors'), /tensor '__metadata__': safetensors reserves that name/);
    expect(existsSync(join(dir, 'weights.safetensors'))).toBe(false);
  });

  it('is deterministic: the same model gives the same bytes', () => {
    const model = readModelFile(fixtureModelPath());
    exportBundle(model, join(work, 'det-a'), 'safetensors');
    exportBundle(readModelFile(fixtureModelPath()), join(work, 'det-b'), 'safetensors');
    for (const f of ['weights.safetensors', 'manifest.json']) {
      expect(readFileSync(join(work, 'det-a', f)).equals(readFileSync(join(work, 'det-b', f))), f).toBe(true);
    }
  });

  it('writes atomically, replaces an older bundle, and refuses bad targets with one-line errors', () => {
    const model = readModelFile(fixtureModelPath());
    const dir = join(work, 'atomic');
    mkdirSync(dir);
    writeFileSync(join(dir, 'weights.safetensors'), 'old');
    exportBundle(model, dir, 'safetensors');
    expect(readdirSync(dir).sort()).toEqual(['manifest.json', 'weights.safetensors']); // no temp or backup files left
    expect(readFileSync(join(dir, 'weights.safetensors')).byteLength).toBeGreaterThan(100);

    const file = join(work, 'not-a-folder');
    writeFileSync(file, 'x');
    expectPleat(() => exportBundle(model, file, 'safetensors'), /not a folder/);
    const blocked = join(work, 'blocked');
    mkdirSync(join(blocked, 'manifest.json'), { recursive: true });
    expectPleat(() => exportBundle(model, blocked, 'safetensors'), /is a folder/);
    expect(readdirSync(blocked)).toEqual(['manifest.json']); // nothing else was written
    // a FIFO where a bundle file goes: the rename would replace the pipe itself with a plain file
    const piped = join(work, 'piped');
    mkdirSync(piped);
    execFileSync('mkfifo', [join(piped, 'weights.safetensors')]);
    expectPleat(() => exportBundle(model, piped, 'safetensors'), /weights\.safetensors: is a FIFO, not a file/);
    expect(readdirSync(piped)).toEqual(['weights.safetensors']);
    expect(lstatSync(join(piped, 'weights.safetensors')).isFIFO()).toBe(true);
    expectPleat(() => exportBundle(model, join(work, 'x'), 'onnx' as never), /--bundle-format 'onnx'/);
    // a tensor whose data is shorter than its dims: refused before anything is created
    const damaged = readModelFile(fixtureModelPath());
    damaged.graph.initializers[0]!.storage = { kind: 'raw', bytes: new Uint8Array(4) };
    expectPleat(() => exportBundle(damaged, join(work, 'damaged'), 'c'), /'stem.conv.weight' holds 1 elements but its dims \[4,2,3,3\] need 72/);
    expect(existsSync(join(work, 'damaged'))).toBe(false);
  });
});

function expectPleat(fn: () => unknown, re: RegExp): void {
  refusedWith(fn, re);
}
