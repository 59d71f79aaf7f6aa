// Lossless I/O: a model written with no change is byte-identical; a changed one keeps every untouched
// message byte for byte, including fields the bundled schema does not know.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { existsSync, mkdtempSync, readFileSync, writeFileSync, mkdirSync, utimesSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, T, f, randn, rng, tensor } from '../helpers/build.js';
import { parseModel, readModelFile } from '../../src/onnx/read.js';
import { readWholeUpTo } from '../../src/onnx/sparse-read.js';
import { serializeModel, writeModelFile } from '../../src/onnx/write.js';
import { setTensorValues } from '../../src/graph/edit.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';
import { runOrt, maxDiff } from '../helpers/ort.js';

const tmp = () => mkdtempSync(join(tmpdir(), 'pleat-rt-'));

function convModel(form: 'raw' | 'typed', asConstant: boolean): Uint8Array {
  const r = rng(7);
  const g = new GraphBuilder('conv_bn');
  g.input('x', ['batch', 3, 8, 8]).output('y', ['batch', 4, 8, 8]);
  const W = randn(r, 4 * 3 * 9);
  if (asConstant) g.constant('W', [4, 3, 3, 3], W, T.FLOAT, form); else g.init('W', [4, 3, 3, 3], W, T.FLOAT, form);
  g.init('B', [4], randn(r, 4), T.FLOAT, form);
  g.init('int64s', [2], [-1, 9007199254740991], T.INT64, form);
  g.init('d', [2], [0.1, -2.5], T.DOUBLE, form);
  g.init('h', [3], [1, -2, 0.5], T.FLOAT16, form);
  g.init('bf', [2], [1.5, -3], T.BFLOAT16, form);
  g.init('i8', [2], [-3, 7], T.INT8, form);
  g.node('Conv', ['x', 'W', 'B'], { pads: [1, 1, 1, 1], kernel_shape: [3, 3] }, { name: 'conv0', outputs: ['c'] });
  g.node('LeakyRelu', ['c'], { alpha: f(0.1) }, { name: 'relu0', outputs: ['y'] });
  g.info('c', ['batch', 4, 8, 8]);
  return modelBytes(g);
}

/** Append an unknown field (number 99, length-delimited) to a message's bytes. */
function withUnknownField(bytes: Uint8Array): Uint8Array {
  const extra = [0x9a, 0x06, 0x03, 0x61, 0x62, 0x63]; // tag (99<<3|2) as varint 0x9a 0x06, len 3, "abc"
  return new Uint8Array([...bytes, ...extra]);
}

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('lossless model I/O', () => {
  for (const form of ['raw', 'typed'] as const) {
    for (const asConstant of [false, true]) {
      it(`is byte-identical when unchanged (${form} tensors, weights as ${asConstant ? 'Constant node' : 'initializer'})`, () => {
        const bytes = convModel(form, asConstant);
        const m = parseModel(bytes, '/nonexistent');
        expect(Buffer.from(serializeModel(m)).equals(Buffer.from(bytes))).toBe(true);
      });
    }
  }

  it('decodes every storage form to the same numbers', () => {
    const a = parseModel(convModel('raw', false), '/x');
    const b = parseModel(convModel('typed', false), '/x');
    for (const name of ['W', 'B', 'int64s', 'd', 'h', 'bf', 'i8']) {
      const ta = a.graph.initializers.find((t) => t.name === name)!;
      const tb = b.graph.initializers.find((t) => t.name === name)!;
      expect(Array.from(tensorToFloat64(ta))).toEqual(Array.from(tensorToFloat64(tb)));
    }
    const i64 = a.graph.initializers.find((t) => t.name === 'int64s')!;
    expect(Array.from(tensorToFloat64(i64))).toEqual([-1, 9007199254740991]);
    const h = a.graph.initializers.find((t) => t.name === 'h')!;
    expect(Array.from(tensorToFloat64(h))).toEqual([1, -2, 0.5]);
  });

  it('keeps unknown fields byte for byte, at every level, when something else changes', () => {
    // Build a model, then splice an unknown field into the model, the graph, a node and a tensor message
    // by re-encoding with onnx-proto and appending raw bytes (fields newer than the bundled schema).
    const { onnx } = onnxProto;
    const g = new GraphBuilder();
    g.input('x', [1, 2]).output('y', [1, 2]);
    g.init('s', [2], [2, 3]);
    g.init('keep', [2], [5, 6]);
    g.node('Mul', ['x', 's'], {}, { name: 'mul', outputs: ['m'] });
    g.node('Add', ['m', 'keep'], {}, { name: 'add', outputs: ['y'] });
    const model = onnx.ModelProto.decode(modelBytes(g));
    const enc = <M>(type: { encode(m: M): { finish(): Uint8Array } }, m: M) => withUnknownField(type.encode(m).finish());
    const graph = model.graph!;
    const nodeBytes = graph.node!.map((n) => enc(onnx.NodeProto, n as onnxProto.onnx.NodeProto));
    const initBytes = graph.initializer!.map((t) => enc(onnx.TensorProto, t as onnxProto.onnx.TensorProto));
    // hand-assemble the graph: node(1), initializer(5), input(11), output(12), then unknown field 99
    const parts: number[] = [];
    const lenField = (no: number, b: Uint8Array) => {
      parts.push(...varint(no * 8 + 2), ...varint(b.length), ...b);
    };
    nodeBytes.forEach((b) => lenField(1, b));
    initBytes.forEach((b) => lenField(5, b));
    graph.input!.forEach((v) => lenField(11, onnx.ValueInfoProto.encode(v).finish()));
    graph.output!.forEach((v) => lenField(12, onnx.ValueInfoProto.encode(v).finish()));
    const graphBytes = withUnknownField(new Uint8Array(parts));
    const top: number[] = [];
    top.push(...varint(1 * 8), ...varint(8));
    const ops = onnx.OperatorSetIdProto.encode({ domain: '', version: 17 }).finish();
    top.push(...varint(8 * 8 + 2), ...varint(ops.length), ...ops);
    top.push(...varint(7 * 8 + 2), ...varint(graphBytes.length), ...graphBytes);
    const bytes = withUnknownField(new Uint8Array(top));

    const m = parseModel(bytes, '/x');
    expect(m.extra.map((r) => r.field)).toEqual([99]);
    expect(m.graph.extra.map((r) => r.field)).toEqual([99]);
    expect(m.graph.nodes[0]!.extra.map((r) => r.field)).toEqual([99]);
    expect(Buffer.from(serializeModel(m)).equals(Buffer.from(bytes))).toBe(true);

    // change one tensor: everything else must survive byte for byte
    setTensorValues(m.graph.initializers[0]!, [4, 9]);
    const out = serializeModel(m);
    const again = parseModel(out, '/x');
    expect(again.extra.map((r) => r.field)).toEqual([99]);
    expect(again.graph.extra.map((r) => r.field)).toEqual([99]);
    expect(again.graph.initializers[0]!.extra.map((r) => r.field)).toEqual([99]);
    expect(Array.from(tensorToFloat64(again.graph.initializers[0]!))).toEqual([4, 9]);
    const contains = (hay: Uint8Array, needle: Uint8Array) => Buffer.from(hay).indexOf(Buffer.from(needle)) >= 0;
    for (const b of nodeBytes) expect(contains(out, b)).toBe(true); // nodes untouched: same bytes
    expect(contains(out, initBytes[1]!)).toBe(true); // the other initializer untouched
    expect(contains(out, initBytes[0]!)).toBe(false); // the changed one is re-encoded
  });

  it('writes a changed model that the ONNX checker accepts and onnxruntime-node runs', async () => {
    const dir = tmp();
    const src = join(dir, 'in.onnx');
    writeFileSync(src, convModel('raw', false));
    const before = readFileSync(src);
    const m = readModelFile(src);
    const W = m.graph.initializers.find((t) => t.name === 'W')!;
    const vals = tensorToFloat64(W).map((v) => v * 2);
    setTensorValues(W, vals);
    const out = join(dir, 'out.onnx');
    writeModelFile(m, out);
    expect(readFileSync(src).equals(before)).toBe(true); // input never modified
    // Source: the ONNX standard's reference checker (Debian python3-onnx), full_check=True
    if (checkerAvailable()) expect(onnxCheck(out)).toBe('');
    const x = randn(rng(3), 3 * 64);
    const a = await runOrt(readFileSync(src), { x: { dims: [1, 3, 8, 8], data: x } });
    const b = await runOrt(readFileSync(out), { x: { dims: [1, 3, 8, 8], data: x } });
    // doubled weights with positive-part Relu: y' = relu(2Wx + B) differs, but the bias path is untouched;
    // check a value we can reason about: the output changed and has the same shape
    expect(b.y!.dims).toEqual(a.y!.dims);
    expect(maxDiff(a.y!.data, b.y!.data).maxAbs).toBeGreaterThan(0);
  });

  it('reads and writes external data; the side file is named after the output, never after the input', () => {
    const dir = tmp();
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 4]);
    const t = tensor('s', [4], [1, 2, 3, 4]);
    const data = new Uint8Array(64 + 16);
    data.set(t.rawData!, 64);
    writeFileSync(join(dir, 'weights.bin'), data);
    delete t.rawData;
    t.dataLocation = onnxProto.onnx.TensorProto.DataLocation.EXTERNAL;
    t.externalData = [{ key: 'location', value: 'weights.bin' }, { key: 'offset', value: '64' }, { key: 'length', value: '16' }];
    g.inits.push(t);
    g.node('Mul', ['x', 's'], {}, { outputs: ['y'] });
    const bytes = modelBytes(g);
    writeFileSync(join(dir, 'm.onnx'), bytes);
    const m = readModelFile(join(dir, 'm.onnx'));
    expect(Array.from(tensorToFloat64(m.graph.initializers[0]!))).toEqual([1, 2, 3, 4]);
    const outDir = join(dir, 'out');
    mkdirSync(outDir);
    writeModelFile(m, join(outDir, 'm.onnx'));
    // weights.bin in another folder could be another model's side file of the same name (issue 11 item 1)
    expect(existsSync(join(outDir, 'weights.bin'))).toBe(false);
    expect(readFileSync(join(outDir, 'm.onnx.data')).byteLength).toBe(16);
    // written again from its own output, nothing changes: same location, same offsets, same bytes
    const again = join(dir, 'again');
    mkdirSync(again);
    writeModelFile(readModelFile(join(outDir, 'm.onnx')), join(again, 'm.onnx'));
    expect(readFileSync(join(again, 'm.onnx')).equals(readFileSync(join(outDir, 'm.onnx')))).toBe(true);
    const back = readModelFile(join(outDir, 'm.onnx'));
    expect(Array.from(tensorToFloat64(back.graph.initializers[0]!))).toEqual([1, 2, 3, 4]);
    // written next to the input: the side file gets a new name, the input's side file is untouched
    writeModelFile(m, join(dir, 'm2.onnx'));
    expect(readFileSync(join(dir, 'weights.bin')).equals(Buffer.from(data))).toBe(true);
    const m2 = readModelFile(join(dir, 'm2.onnx'));
    expect(Array.from(tensorToFloat64(m2.graph.initializers[0]!))).toEqual([1, 2, 3, 4]);
    // threshold: move everything of 16 bytes or more to a side file
    writeModelFile(readModelFile(src4(dir)), join(outDir, 'ext.onnx'), { externalThreshold: 16 });
    const ext = readModelFile(join(outDir, 'ext.onnx'));
    expect(ext.graph.initializers[0]!.storage.kind).toBe('external');
    expect(Array.from(tensorToFloat64(ext.graph.initializers[0]!))).toEqual([1, 2, 3, 4]);
    if (checkerAvailable()) expect(onnxCheck(join(outDir, 'ext.onnx'))).toBe('');
  });
});

function src4(dir: string): string {
  const g = new GraphBuilder();
  g.input('x', [1, 4]).output('y', [1, 4]);
  g.init('s', [4], [1, 2, 3, 4]);
  g.node('Mul', ['x', 's'], {}, { outputs: ['y'] });
  writeFileSync(join(dir, 'inline.onnx'), modelBytes(g));
  return join(dir, 'inline.onnx');
}

function varint(v: number): number[] {
  const out: number[] = [];
  while (v >= 128) { out.push((v & 0x7f) | 0x80); v = Math.floor(v / 128); }
  out.push(v);
  return out;
}

describe('sparse reading of large weights', () => {
  it('leaves big payloads on disk until needed, streams them back, and keeps in-place edits', () => {
    const dir = tmp();
    const r = rng(11);
    const g = new GraphBuilder();
    g.input('x', [1, 64]).output('y', [1, 512]);
    const w1 = randn(r, 64 * 512), w2 = randn(r, 512 * 512), w3 = randn(r, 512 * 512);
    g.init('w1', [64, 512], w1); g.init('w2', [512, 512], w2); g.init('w3', [512, 512], w3);
    const a = g.node('MatMul', ['x', 'w1']);
    const b = g.node('MatMul', [a, 'w2']);
    g.node('MatMul', [b, 'w3'], {}, { outputs: ['y'] });
    const bytes = modelBytes(g);
    const src = join(dir, 'big.onnx');
    writeFileSync(src, bytes);

    // unchanged: byte-identical, both through the file writer and in memory
    const m = readModelFile(src);
    writeModelFile(m, join(dir, 'same.onnx'));
    expect(readFileSync(join(dir, 'same.onnx')).equals(Buffer.from(bytes))).toBe(true);
    expect(Buffer.from(serializeModel(readModelFile(src))).equals(Buffer.from(bytes))).toBe(true);

    // change w2 in place (the fold engine's memory-saving path), leave w1 and w3 unread
    const m2 = readModelFile(src);
    const t2 = m2.graph.initializers[1]!;
    const doubled = tensorToFloat64(t2).map((v) => v * 2);
    setTensorValues(t2, doubled, { inPlace: true });
    writeModelFile(m2, join(dir, 'changed.onnx'));
    const back = readModelFile(join(dir, 'changed.onnx'));
    expect(Array.from(tensorToFloat64(back.graph.initializers[0]!))).toEqual(Array.from(w1));
    expect(Array.from(tensorToFloat64(back.graph.initializers[1]!))).toEqual(Array.from(Float32Array.from(w2, (v) => v * 2)));
    expect(Array.from(tensorToFloat64(back.graph.initializers[2]!))).toEqual(Array.from(w3));
    expect(readFileSync(src).equals(Buffer.from(bytes))).toBe(true); // the input is never modified
  });
});

describe('overridable initializers', () => {
  it('marks an initializer that is also a graph input (IR >= 4) as a default callers may replace', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2]).input('s', [2]).output('y', [1, 2]);
    g.init('s', [2], [1, 2]);
    g.init('t', [2], [3, 4]);
    g.node('Mul', ['x', 's'], {}, { outputs: ['m'] });
    g.node('Add', ['m', 't'], {}, { outputs: ['y'] });
    const m = parseModel(modelBytes(g), '/x');
    expect(m.graph.initializers.map((t) => [t.name, t.overridable ?? false])).toEqual([['s', true], ['t', false]]);
    const old = parseModel(modelBytes(g, { irVersion: 3, opset: 7 }), '/x');
    expect(old.graph.initializers.map((t) => t.overridable ?? false)).toEqual([false, false]);
  });

  it('marks them inside subgraphs too, at any depth (a Loop body whose initializer gives a body input a default)', () => {
    const body = (depth: number): GraphBuilder => {
      const b = new GraphBuilder();
      b.input('i', [], T.INT64).input('c', [], T.BOOL).input('k', [2]).output('c_out', [], T.BOOL).output('k_out', [2]);
      b.init('k', [2], [5, 6]);
      b.init('u', [2], [7, 8]);
      b.node('Identity', ['c'], {}, { outputs: ['c_out'] });
      if (depth === 0) b.node('Add', ['k', 'u'], {}, { outputs: ['k_out'] });
      else b.node('Loop', ['', 'c', 'k'], { body: body(depth - 1) }, { outputs: ['k_out'] });
      return b;
    };
    const g = new GraphBuilder();
    g.input('x', [2]).output('y', [2]);
    g.init('trip', [], [1], T.INT64);
    g.init('cond', [], [1], T.BOOL);
    g.node('Loop', ['trip', 'cond', 'x'], { body: body(1) }, { outputs: ['y'] });
    const m = parseModel(modelBytes(g), '/x');
    const marks: Array<[string, boolean]> = [];
    const walk = (gr: typeof m.graph): void => {
      for (const t of gr.initializers) marks.push([t.name, t.overridable ?? false]);
      for (const n of gr.nodes) for (const a of n.attributes) if (a.value.type === 'GRAPH') walk(a.value.g);
    };
    walk(m.graph);
    expect(marks).toEqual([['trip', false], ['cond', false], ['k', true], ['u', false], ['k', true], ['u', false]]);
  });

  it('marks exactly the initializers listed as inputs, with few inputs or many (seeded)', () => {
    const r = rng(17);
    for (const inputs of [1, 3, 8, 9, 20]) {
      const g = new GraphBuilder();
      const want: Array<[string, boolean]> = [];
      let h = 'x0';
      g.input('x0', [2]).output('y', [2]);
      for (let k = 0; k < 30; k++) {
        const name = `w${k}`;
        const listed = want.filter(([, o]) => o).length < inputs - 1 && r() < 0.5;
        if (listed) g.input(name, [2]);
        g.init(name, [2], [k, k + 1]);
        want.push([name, listed]);
        h = g.node('Add', [h, name], {}, { outputs: [k === 29 ? 'y' : `a${k}`] });
      }
      const m = parseModel(modelBytes(g), '/x');
      expect(m.graph.inputs.length).toBeLessThanOrEqual(inputs);
      expect(m.graph.initializers.map((t) => [t.name, t.overridable ?? false])).toEqual(want);
    }
  });
});

describe('a source file that changes while in use', () => {
  it('is refused with one clear error instead of mixing old and new bytes', () => {
    const dir = tmp();
    const g = new GraphBuilder();
    g.input('x', [1, 256]).output('y', [1, 512]);
    g.init('w', [256, 512], randn(rng(1), 256 * 512));
    g.node('MatMul', ['x', 'w'], {}, { outputs: ['y'] });
    const src = join(dir, 'm.onnx');
    writeFileSync(src, modelBytes(g));
    const m = readModelFile(src); // the 512 KiB weight stays on disk
    const later = new Date(Date.now() + 5000);
    writeFileSync(src, modelBytes(g)); // same bytes, new modification time: pleat cannot know it is the same
    utimesSync(src, later, later);
    expect(() => writeModelFile(m, join(dir, 'out.onnx'))).toThrow(/changed while pleat was using it/);
    expect(existsSync(join(dir, 'out.onnx'))).toBe(false);
  });
});
