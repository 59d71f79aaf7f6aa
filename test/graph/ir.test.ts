// Tensors as the reader makes them (FileTensor): raw_data stays offsets into the file buffer until `storage` is
// asked for, and the answers that need no bytes (kind, byte length, element count) come without a view.
import { describe, expect, it } from 'vitest';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, rng, tensor } from '../helpers/build.js';
import { decodeModel, parseTensor } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { FileNode, FileSpans, FileTensor, externalStorage, rawByteLength, rawBytesOf, storageKind, type Node, type Tensor } from '../../src/graph/ir.js';
import { storedElementCount, tensorByteSize, tensorToFloat64 } from '../../src/graph/tensor.js';
import { setTensorValues, touch } from '../../src/graph/edit.js';
import { readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';

const { onnx } = onnxProto;

const tensorBytes = (t: onnxProto.onnx.ITensorProto) => onnx.TensorProto.encode(t).finish();

describe('FileTensor', () => {
  it('holds raw_data as offsets and gives the same bytes and figures as the storage view', () => {
    const r = rng(3);
    for (let k = 0; k < 40; k++) {
      const dims = [1 + Math.floor(r() * 4), 1 + Math.floor(r() * 5)];
      const values = Array.from({ length: dims[0]! * dims[1]! }, () => Math.round((r() - 0.5) * 100) / 8);
      const bytes = tensorBytes(tensor(`t${k}`, dims, values));
      const t = parseTensor(bytes);
      expect(t).toBeInstanceOf(FileTensor);
      expect(storageKind(t)).toBe('raw');
      expect(rawByteLength(t)).toBe(values.length * 4);
      expect(storedElementCount(t)).toBe(values.length);
      expect(tensorByteSize(t)).toBe(values.length * 4);
      expect(externalStorage(t)).toBeUndefined();
      const s = t.storage;
      expect(s.kind).toBe('raw');
      expect(t.storage).toBe(s); // made once and kept (decoded-value caches key on it)
      expect(Array.from(tensorToFloat64(t))).toEqual(values);
      // the view is into the buffer read, where the field's payload is
      const at = (s as { bytes: Uint8Array }).bytes;
      expect(at.buffer).toBe(bytes.buffer);
      expect(Buffer.from(at).equals(Buffer.from(new Float32Array(values).buffer))).toBe(true);
    }
  });

  it('gives views of its raw bytes without keeping one until storage is asked for', () => {
    const bytes = tensorBytes(tensor('w', [3], [1.5, -2, 4]));
    const t = parseTensor(bytes);
    const a = rawBytesOf(t)!, b = rawBytesOf(t)!;
    expect(a).not.toBe(b); // a new view each time: nothing kept on the tensor
    expect(a.buffer).toBe(b.buffer);
    expect([a.byteOffset, a.byteLength]).toEqual([b.byteOffset, b.byteLength]);
    expect(Array.from(tensorToFloat64(t))).toEqual([1.5, -2, 4]);
    const s = t.storage as { bytes: Uint8Array };
    expect(rawBytesOf(t)).toBe(s.bytes); // once made, the storage's own view
    expect([s.bytes.byteOffset, s.bytes.byteLength]).toEqual([a.byteOffset, a.byteLength]);
    expect(rawBytesOf(parseTensor(tensorBytes(tensor('f', [1], [1], 1, 'typed'))))).toBeUndefined();
  });

  it('answers for typed and empty storage as a plain tensor does', () => {
    const typed = parseTensor(tensorBytes(tensor('f', [3], [1, 2, 3], 1, 'typed')));
    expect(storageKind(typed)).toBe('float_data');
    expect(rawByteLength(typed)).toBe(-1);
    expect(storedElementCount(typed)).toBe(3);
    const empty = parseTensor(tensorBytes({ name: 'e', dims: [0], dataType: 1 }));
    expect(storageKind(empty)).toBe('empty');
    expect(storedElementCount(empty)).toBe(0);
    const plain: Tensor = { name: 'p', dims: [2], dataType: 1, storage: { kind: 'float_data', values: new Float32Array([1, 2]) }, docString: '', extra: [] };
    expect(storageKind(plain)).toBe('float_data');
    expect(rawByteLength(plain)).toBe(-1);
  });

  it('takes a new storage and forgets the offsets', () => {
    const t = parseTensor(tensorBytes(tensor('w', [2], [1, 2])));
    setTensorValues(t, [5, 6]);
    expect(Array.from(tensorToFloat64(t))).toEqual([5, 6]);
    t.storage = { kind: 'float_data', values: new Float32Array([7, 8]) };
    expect(storageKind(t)).toBe('float_data');
    expect(rawByteLength(t)).toBe(-1);
    expect(Array.from(tensorToFloat64(t))).toEqual([7, 8]);
  });

  it('holds its origin as offsets, made on each asking, cleared by touch and set back by assignment', () => {
    const bytes = tensorBytes(tensor('w', [2], [1, 2]));
    const t = parseTensor(bytes);
    const o = t.origin!;
    expect([o.buf, o.start, o.end]).toEqual([bytes, 0, bytes.byteLength]);
    expect(t.origin).toEqual(o); // the same offsets each time (a new object: the reader of external data assigns one)
    expect(Object.keys(t).sort()).toEqual(['dataType', 'dims', 'docString', 'extra', 'name']); // no offsets as own fields
    touch(t);
    expect(t.origin).toBeUndefined();
    t.origin = o; // an undo puts it back
    expect(t.origin).toBe(o);
  });

  it('a node read from a file holds its origin the same way, and shares one frozen empty attribute list', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 4]);
    g.node('Relu', ['x'], {}, { name: 'r', outputs: ['a'] });
    g.node('LeakyRelu', ['a'], { alpha: 0.5 }, { name: 'l', outputs: ['y'] });
    const bytes = modelBytes(g);
    const m = decodeModel(bytes, '/x');
    const [r, l] = m.graph.nodes as [Node, Node];
    expect(r).toBeInstanceOf(FileNode);
    const o = r.origin!;
    expect(o.buf).toBe(bytes);
    expect(r.origin).toEqual(o);
    expect(Object.keys(r).sort()).toEqual(['attributes', 'docString', 'domain', 'extra', 'inputs', 'name', 'opType', 'outputs']);
    expect(Buffer.from(bytes.subarray(o.start, o.end)).equals(Buffer.from(onnx.NodeProto.encode(onnx.ModelProto.decode(bytes).graph!.node![0]!).finish()))).toBe(true);
    expect(Object.isFrozen(r.attributes)).toBe(true);
    expect(l.attributes.map((a) => a.name)).toEqual(['alpha']);
    // an edit writes the node anew: the writer sees it changed, and the model still reads back
    touch(r);
    expect(r.origin).toBeUndefined();
    r.attributes = [...r.attributes, { name: 'note', value: { type: 'INT', i: 1 }, docString: '', refAttrName: '', extra: [] }];
    const back = decodeModel(serializeModel(m), '/x');
    expect(back.graph.nodes[0]!.attributes.map((a) => a.name)).toEqual(['note']);
  });

  it('no code deletes an origin (a tensor read from a file keeps it on its class, out of reach of delete)', () => {
    const files = (dir: string): string[] => readdirSync(dir, { withFileTypes: true })
      .flatMap((e) => (e.isDirectory() ? files(join(dir, e.name)) : e.name.endsWith('.ts') ? [join(dir, e.name)] : []));
    const root = join(fileURLToPath(new URL('.', import.meta.url)), '..', '..');
    const offenders = [...files(join(root, 'src')), ...files(join(root, 'test'))]
      .filter((f) => /\bdelete\s+[^;\n]*\.origin\b/.test(readFileSync(f, 'utf8')));
    expect(offenders).toEqual([]);
  });

  it('refuses raw_data beside a typed field in either order', () => {
    const raw = tensorBytes(tensor('w', [2], [1, 2]));
    const typed = tensorBytes({ floatData: [3, 4] });
    // protobuf concatenation merges messages: raw_data then float_data, and float_data then raw_data
    for (const bytes of [Buffer.concat([raw, typed]), Buffer.concat([typed, raw])]) {
      expect(() => parseTensor(new Uint8Array(bytes))).toThrow(/holds its data in both float_data and raw_data/);
    }
  });

  it('shares one frozen dims list per shape within a model, and still writes the model back byte for byte', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 4]);
    let last = 'x';
    for (let i = 0; i < 20; i++) {
      g.init(`s${i}`, [4], [1, 2, 3, 4]);
      g.init(`m${i}`, [1, 4], [0, 0, 0, 0]);
      const a = g.node('Mul', [last, `s${i}`], {}, { outputs: [`a${i}`] });
      last = g.node('Add', [a, `m${i}`], {}, { outputs: [i === 19 ? 'y' : `b${i}`] });
    }
    const bytes = modelBytes(g);
    const m = decodeModel(bytes, '/x');
    const inits = m.graph.initializers;
    expect(inits[0]!.dims).toEqual([4]);
    expect(inits[1]!.dims).toEqual([1, 4]);
    for (let i = 2; i < inits.length; i++) expect(inits[i]!.dims).toBe(inits[i % 2]!.dims);
    expect(Object.isFrozen(inits[0]!.dims)).toBe(true);
    expect(() => { (inits[0]!.dims as number[])[0] = 9; }).toThrow(TypeError);
    expect(Buffer.from(serializeModel(m)).equals(Buffer.from(bytes))).toBe(true);
    // an edit replaces the list, so the other tensors of that shape keep theirs
    setTensorValues(inits[0]!, [1, 1, 1, 1, 1, 1, 1, 1], { dims: [2, 4] });
    expect(inits[2]!.dims).toEqual([4]);
  });
});

describe('FileSpans', () => {
  it('keeps offsets up to 2^32 - 1 exactly, in chunks, and refuses a buffer whose end would not fit 32 bits', () => {
    const spans = new FileSpans(new Uint8Array(8));
    const r = rng(5);
    const want: number[][] = [];
    for (let i = 0; i < 40000; i++) { // more than two chunks of 16,384 messages
      const o = [0, 1, 2, 3].map(() => Math.floor(r() * 0xffffffff));
      o[3] = i === 0 ? 0xffffffff : o[3]!;
      want.push(o);
      expect(spans.add(o[0]!, o[1]!, o[2]!, o[3]!)).toBe(i);
    }
    for (let i = 0; i < want.length; i += 997) for (let k = 0; k < 4; k++) expect(spans.offset(i, k)).toBe(want[i]![k]);
    expect(spans.offset(0, 3)).toBe(0xffffffff);
    // a buffer of 2^32 bytes (Node's largest): its end offset would wrap to 0 in 32 bits
    expect(() => new FileSpans({ byteLength: 2 ** 32 } as Uint8Array)).toThrow(/at most 2 GiB; keep the weights in external data/);
  });
});
