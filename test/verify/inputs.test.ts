// Input flags, shape resolution and seeded probes. Models are built with test/helpers/build.ts (onnx-proto's
// own encoder) and read with pleat's reader; .pb inputs are TensorProtos encoded by onnx-proto.
import { describe, expect, it } from 'vitest';
import { mkdirSync, mkdtempSync, truncateSync, writeFileSync } from 'node:fs';
import { withProbeMemory } from '../../src/eval/budget.js';
import { execFileSync } from 'node:child_process';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, T, tensor } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import {
  checkDimFlags, loadInputFile, makeProbe, parseInputFlags, probeValue, resolveInputs, splitmix32, SMALL_INT_MAX, type InputValue,
} from '../../src/verify/inputs.js';
import { npyBytes } from '../../src/verify/npy.js';
import { roundToStorage } from '../../src/graph/tensor.js';
import { DataType } from '../../src/graph/ir.js';
import { PleatError } from '../../src/errors.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-inputs-'));

function err(f: () => unknown): PleatError {
  try { f(); } catch (e) { expect(e).toBeInstanceOf(PleatError); expect((e as Error).message).not.toContain('\n'); return e as PleatError; }
  throw new Error('expected an error');
}

/** image [batch, 3, h, 4] float, mask [batch] bool, ids [2] int64, w [3] with an initializer default. */
function model() {
  const g = new GraphBuilder();
  g.input('image', ['batch', 3, 'h', 4]).input('mask', ['batch'], T.BOOL).input('ids', [2], T.INT64).input('w', [3]);
  g.init('w', [3], [1, 2, 3]);
  g.output('y', ['batch', 3, 'h', 4]);
  g.node('Identity', ['image'], {}, { outputs: ['y'] });
  return parseModel(modelBytes(g), dir);
}

const val = (type: number, dims: number[], file?: string): InputValue => ({ type, dims, data: new Float64Array(dims.reduce((a, b) => a * b, 1)), file });

describe('parseInputFlags', () => {
  it('parses --input, --shape and --dim', () => {
    const s = parseInputFlags({ input: ['x=a/b=c.npy', 'y:0=t.pb'], shape: ['x=1x3x224x224', 's='], dim: ['batch=2'] });
    expect([...s.files]).toEqual([['x', 'a/b=c.npy'], ['y:0', 't.pb']]);
    expect(s.shapes.get('x')).toEqual([1, 3, 224, 224]);
    expect(s.shapes.get('s')).toEqual([]);
    expect(s.dims.get('batch')).toBe(2);
  });

  it('rejects malformed flags with a usage error naming the flag', () => {
    expect(err(() => parseInputFlags({ input: ['x.npy'] })).message).toMatch(/--input 'x\.npy' should be NAME=FILE/);
    expect(err(() => parseInputFlags({ shape: ['x=1x-3'] })).message).toMatch(/--shape 'x=1x-3': '-3' is not a non-negative whole number/);
    // plain decimal digits only: Number() read each of these as some size
    for (const n of [' 3', '3 ', '0x3', '3e0', '3.0', '+3', '03', '0b11']) {
      expect(err(() => parseInputFlags({ dim: [`batch=${n}`] })).message).toBe(`--dim 'batch=${n}': '${n}' is not a non-negative whole number in plain decimal digits`);
      // (in a shape, x separates sizes: 1x0x3 is three sizes)
      if (!n.includes('x')) expect(err(() => parseInputFlags({ shape: [`x=1x${n}`] })).message).toBe(`--shape 'x=1x${n}': '${n}' is not a non-negative whole number in plain decimal digits`);
    }
    expect(err(() => parseInputFlags({ dim: ['batch=99999999999999999999'] })).message).toMatch(/too large/);
    expect(parseInputFlags({ dim: ['batch=0', 'h=10'] }).dims).toEqual(new Map([['batch', 0], ['h', 10]]));
    expect(err(() => parseInputFlags({ dim: ['batch=two'] })).kind).toBe('usage');
    expect(err(() => parseInputFlags({ dim: ['b=1', 'b=2'] })).message).toMatch(/given twice/);
  });
});

describe('resolveInputs', () => {
  it('resolves symbolic dims from --dim and --shape; initializer-backed inputs are not required', () => {
    const m = model();
    const specs = resolveInputs(m.graph, new Map(), new Map([['image', [2, 3, 5, 4]]]), new Map());
    expect(specs.map((s) => [s.name, s.dims])).toEqual([['image', [2, 3, 5, 4]], ['mask', [2]], ['ids', [2]]]);
    const viaDims = resolveInputs(m.graph, new Map(), new Map(), new Map([['batch', 1], ['h', 7]]));
    expect(viaDims[0]!.dims).toEqual([1, 3, 7, 4]);
  });

  it('binds symbols from a given file and checks other inputs against them', () => {
    const m = model();
    const specs = resolveInputs(m.graph, new Map([['image', val(T.FLOAT, [4, 3, 2, 4], 'img.npy')]]));
    expect(specs[1]!.dims).toEqual([4]); // mask takes batch from img.npy
    const e = err(() => resolveInputs(m.graph, new Map([['image', val(T.FLOAT, [4, 3, 2, 4], 'img.npy')], ['mask', val(T.BOOL, [5], 'mask.npy')]])));
    expect(e.message).toBe("input 'mask' dim 'batch' is 5 in mask.npy but 4 from img.npy");
  });

  it('a dynamic dim nothing resolves is missing-shape naming the input, the dim and the flags', () => {
    const e = err(() => resolveInputs(model().graph, new Map()));
    expect(e.kind).toBe('missing-shape');
    expect(e.message).toBe("input 'image' dim 'batch' is dynamic: set it with --dim batch=N or --shape image=Nx3xNx4 (each N a size of 1 or more)");
    const g = new GraphBuilder();
    g.input('x', [null, 2]).input('z').output('x');
    const m = parseModel(modelBytes(g), dir);
    expect(err(() => resolveInputs(m.graph, new Map(), new Map([['z', [1]]]))).message).toBe("input 'x' dim 0 has no size or name: set it with --shape x=Nx2 (each N a size of 1 or more)");
    expect(err(() => resolveInputs(m.graph, new Map(), new Map([['x', [1, 2]]]))).message).toMatch(/^input 'z' has no shape in the model: set it with --shape z=/);
  });

  it('a file of the wrong type or shape is a one-line error naming the input and both', () => {
    const m = model();
    const dims = new Map([['h', 2]]);
    expect(err(() => resolveInputs(m.graph, new Map([['ids', val(T.INT32, [2], 'ids.npy')]]), new Map(), new Map([['batch', 1], ...dims]))).message)
      .toBe("input 'ids' expects int64 but ids.npy holds int32");
    expect(err(() => resolveInputs(m.graph, new Map([['image', val(T.FLOAT, [1, 4, 2, 4], 'img.npy')]]))).message)
      .toBe("input 'image' expects shape [batch,3,h,4] but img.npy has [1,4,2,4]");
    expect(err(() => resolveInputs(m.graph, new Map([['image', val(T.FLOAT, [1, 3, 2], 'img.npy')]]))).message)
      .toBe("input 'image' expects shape [batch,3,h,4] but img.npy has [1,3,2]");
    expect(err(() => resolveInputs(m.graph, new Map([['imag', val(T.FLOAT, [1])]]))).message)
      .toBe("--input 'imag': the model has no input named 'imag' (its inputs: image, mask, ids, w)");
    expect(err(() => resolveInputs(m.graph, new Map(), new Map([['image', [1, 3, 2, 4]]]), new Map([['batch', 2]]))).message)
      .toBe("input 'image' dim 'batch' is 1 in --shape image=1x3x2x4 but 2 from --dim batch=2");
  });

  it('a --dim naming no symbol is a usage error', () => {
    expect(err(() => checkDimFlags(new Map([['bach', 1]]), [model().graph])).message).toBe("--dim 'bach' matches no dynamic dim of the model inputs (their dims: batch, h)");
    checkDimFlags(new Map([['batch', 1]]), [model().graph]);
  });
});

describe('input files', () => {
  it('reads .npy and .pb (TensorProto encoded by onnx-proto) files', () => {
    const npy = join(dir, 'a.npy');
    writeFileSync(npy, npyBytes({ type: DataType.FLOAT, dims: [2], data: new Float64Array([1.5, -2]) }));
    const a = loadInputFile(npy);
    expect([a.type, a.dims, Array.from(a.data), a.file]).toEqual([DataType.FLOAT, [2], [1.5, -2], npy]);
    const pb = join(dir, 'input_0.pb');
    writeFileSync(pb, onnxProto.onnx.TensorProto.encode(tensor('x', [2, 2], [1, 2, 3, 4], T.INT64)).finish());
    const b = loadInputFile(pb);
    expect([b.type, b.dims, Array.from(b.data)]).toEqual([DataType.INT64, [2, 2], [1, 2, 3, 4]]);
    const typed = join(dir, 'typed.pb');
    writeFileSync(typed, onnxProto.onnx.TensorProto.encode(tensor('x', [3], [0.5, 1, 2], T.FLOAT, 'typed')).finish());
    expect(Array.from(loadInputFile(typed).data)).toEqual([0.5, 1, 2]);
  });

  it('names the file on errors', () => {
    const bad = join(dir, 'bad.pb');
    writeFileSync(bad, new Uint8Array([0xff, 0xff, 0xff]));
    expect(err(() => loadInputFile(bad)).message).toMatch(new RegExp(`^${bad}: `));
    expect(err(() => loadInputFile(join(dir, 'x.csv'))).message).toMatch(/x\.csv: pleat reads input values from \.npy files or \.pb files/);
    expect(err(() => loadInputFile(join(dir, 'missing.pb'))).message).toMatch(/missing\.pb: cannot read \(ENOENT\)/);
  });

  it('takes a .pb only when its data is held in the field its type uses and fills its dims exactly', () => {
    // onnx.proto3, TensorProto: float_data for FLOAT, int32_data for INT32/INT16/INT8/UINT16/UINT8/BOOL/FLOAT16/
    // BFLOAT16, int64_data for INT64, double_data for DOUBLE, uint64_data for UINT32/UINT64; segment for a chunk of
    // a larger tensor; data_location EXTERNAL for data kept in another file
    const TP = onnxProto.onnx.TensorProto;
    const write = (name: string, fields: Record<string, unknown>) => {
      const p = join(dir, name);
      writeFileSync(p, TP.encode(TP.fromObject({ name: 'x', ...fields })).finish());
      return p;
    };
    const f32 = (xs: number[]) => new Uint8Array(new Float32Array(xs).buffer);
    // raw_data longer than the dims: the extra bytes were dropped without a word
    const long = write('long.pb', { dims: [2], dataType: T.FLOAT, rawData: f32([1, 2, 3]) });
    const e1 = err(() => loadInputFile(long));
    expect(e1.kind).toBe('bad-input');
    expect(e1.message).toBe(`${long}: tensor 'x' holds 12 bytes of raw_data but its dims [2] of float32 need 8`);
    const short = write('short.pb', { dims: [3], dataType: T.FLOAT, floatData: [1, 2] });
    expect(err(() => loadInputFile(short)).message).toBe(`${short}: tensor 'x' holds 2 values in float_data but its dims [3] need 3`);
    // float values kept in int64_data were read as if the field were right
    const wrong = write('wrong.pb', { dims: [2], dataType: T.FLOAT, int64Data: [1, 2] });
    expect(err(() => loadInputFile(wrong)).message).toBe(`${wrong}: tensor 'x' is float32 but holds its values in int64_data (float32 values go in float_data or raw_data)`);
    const seg = write('segment.pb', { dims: [2], dataType: T.FLOAT, rawData: f32([1, 2]), segment: { begin: 0, end: 1 } });
    expect(err(() => loadInputFile(seg)).message).toMatch(new RegExp(`^${seg}: tensor 'x' is one segment of a larger tensor`));
    const ext = write('external.pb', { dims: [2], dataType: T.FLOAT, dataLocation: 1, externalData: [{ key: 'location', value: 'w.bin' }] });
    expect(err(() => loadInputFile(ext)).message).toMatch(new RegExp(`^${ext}: tensor 'x' keeps its values in an external file`));
    // what the standard allows still reads: int32_data for float16 bits and bools, uint64_data for uint32
    expect(Array.from(loadInputFile(write('half.pb', { dims: [2], dataType: T.FLOAT16, int32Data: [0x3c00, 0xc000] })).data)).toEqual([1, -2]);
    expect(Array.from(loadInputFile(write('bool.pb', { dims: [2], dataType: T.BOOL, int32Data: [1, 0] })).data)).toEqual([1, 0]);
    expect(Array.from(loadInputFile(write('u32.pb', { dims: [2], dataType: T.UINT32, uint64Data: [7, 4294967295] })).data)).toEqual([7, 4294967295]);
    expect(Array.from(loadInputFile(write('exact.pb', { dims: [2], dataType: T.FLOAT, rawData: f32([1, 2]) })).data)).toEqual([1, 2]);
  });

  it('refuses a value file beyond the probe memory limit before reading its data', () => {
    // 20,000,000 float32 values (80 MB of data, a sparse file): 160 MB as the float64 value the probe holds
    const header = "{'descr': '<f4', 'fortran_order': False, 'shape': (1, 2, 10000000), }";
    const head = npyBytes({ type: DataType.FLOAT, dims: [0], data: new Float64Array(0) }).slice(0, 10);
    const text = header + ' '.repeat(64 * Math.ceil((10 + header.length + 1) / 64) - 10 - header.length - 1) + '\n';
    new DataView(head.buffer).setUint16(8, text.length, true);
    const big = join(dir, 'big.npy');
    writeFileSync(big, Buffer.concat([head, Buffer.from(text, 'latin1')]));
    truncateSync(big, 10 + text.length + 80_000_000);
    const e = err(() => withProbeMemory(16 * 1024 * 1024, () => loadInputFile(big)));
    expect(e.kind).toBe('bad-input');
    expect(e.message).toBe(`${big}: shape (1, 2, 10000000) holds 20000000 values, 152.6 MiB as the evaluator holds them (float64), beyond the probe memory limit of 16.0 MiB; raise --max-probe-memory`);
    // a .pb is refused by its size before it is read and decoded
    const pb = join(dir, 'big.pb');
    writeFileSync(pb, '');
    truncateSync(pb, 20_000_000);
    expect(err(() => withProbeMemory(16 * 1024 * 1024, () => loadInputFile(pb))).message)
      .toBe(`${pb}: 19.1 MiB, beyond the probe memory limit of 16.0 MiB for the value it holds; raise --max-probe-memory`);
    // a small .pb whose values take far more as float64 (2,000,000 int8 in raw_data: 15.3 MiB) is refused before decoding
    const i8 = join(dir, 'int8.pb');
    writeFileSync(i8, onnxProto.onnx.TensorProto.encode(onnxProto.onnx.TensorProto.fromObject({ name: 'x', dims: [2000000], dataType: T.INT8, rawData: new Uint8Array(2000000) })).finish());
    expect(err(() => withProbeMemory(8 * 1024 * 1024, () => loadInputFile(i8))).message)
      .toBe(`${i8}: dims [2000000] hold 2000000 values, 15.3 MiB as the evaluator holds them (float64), beyond the probe memory limit of 8.0 MiB; raise --max-probe-memory`);
    // a file within the limit still reads
    expect(loadInputFile(join(dir, 'a.npy')).dims).toEqual([2]);
  });

  // a FIFO blocked the read until something wrote to it, or for ever (and SIGTERM could not end it)
  it('refuses a FIFO or a folder without waiting', () => {
    for (const name of ['pipe.npy', 'pipe.pb']) {
      const p = join(dir, name);
      execFileSync('mkfifo', [p]);
      expect(err(() => loadInputFile(p)).message).toBe(`${p}: not a regular file (a FIFO, socket or device), expected an input value file (.npy or .pb)`);
    }
    const folder = join(dir, 'folder.npy');
    mkdirSync(folder);
    expect(err(() => loadInputFile(folder)).message).toMatch(/folder\.npy: is a folder/);
  });
});

describe('probes', () => {
  it('splitmix32 is deterministic and roughly uniform', () => {
    const r = splitmix32(0), s = splitmix32(0);
    const xs = Array.from({ length: 10000 }, () => r());
    expect(xs.slice(0, 5)).toEqual(Array.from({ length: 5 }, () => s()));
    const mean = xs.reduce((a, b) => a + b, 0) / xs.length;
    expect(Math.abs(mean - 0.5)).toBeLessThan(0.01); // standard error of the mean is 0.0029
    expect(Math.min(...xs)).toBeGreaterThanOrEqual(0);
    expect(Math.max(...xs)).toBeLessThan(1);
  });

  it('float probes are standard normal and rounded to the element type', () => {
    const v = probeValue({ name: 'x', type: DataType.FLOAT, dims: [20000] }, 0, 0);
    const d = Array.from(v.data);
    const mean = d.reduce((a, b) => a + b, 0) / d.length;
    const variance = d.reduce((a, b) => a + (b - mean) ** 2, 0) / d.length;
    expect(Math.abs(mean)).toBeLessThan(0.03); // standard error 1/sqrt(20000) = 0.007
    expect(Math.abs(variance - 1)).toBeLessThan(0.04);
    expect(d.every((x) => Math.fround(x) === x)).toBe(true);
    const h = probeValue({ name: 'x', type: DataType.FLOAT16, dims: [100] }, 0, 0);
    expect(Array.from(h.data).every((x) => Math.fround(x) === x && Number.isInteger(x * 2 ** 24))).toBe(true);
  });

  it('integer probes are small non-negative ints, bools 0/1', () => {
    const i = probeValue({ name: 'i', type: DataType.INT64, dims: [1000] }, 3, 0);
    const seen = new Set(i.data);
    expect([...seen].sort()).toEqual(Array.from({ length: SMALL_INT_MAX + 1 }, (_, k) => k));
    const b = probeValue({ name: 'b', type: DataType.BOOL, dims: [1000] }, 3, 0);
    expect([...new Set(b.data)].sort()).toEqual([0, 1]);
  });

  it('probes depend on seed, probe index and input name, not on input order; given values pass through', () => {
    const spec = { name: 'x', type: DataType.FLOAT, dims: [8] };
    const a = probeValue(spec, 0, 0).data, b = probeValue(spec, 0, 0).data;
    expect(Array.from(a)).toEqual(Array.from(b));
    expect(Array.from(probeValue(spec, 1, 0).data)).not.toEqual(Array.from(a));
    expect(Array.from(probeValue(spec, 0, 1).data)).not.toEqual(Array.from(a));
    expect(Array.from(probeValue({ ...spec, name: 'y' }, 0, 0).data)).not.toEqual(Array.from(a));
    const given: InputValue = { type: DataType.FLOAT, dims: [2], data: new Float64Array([7, 8]), file: 'g.npy' };
    const p1 = makeProbe([{ ...spec }, { name: 'g', type: DataType.FLOAT, dims: [2], given }], 0, 0);
    const p2 = makeProbe([{ name: 'g', type: DataType.FLOAT, dims: [2], given }, { ...spec }], 0, 0);
    expect(Array.from(p1.get('x')!.data)).toEqual(Array.from(p2.get('x')!.data));
    expect(Array.from(p1.get('g')!.data)).toEqual([7, 8]);
  });

  it('a float probe is the float64 draw rounded to its type, made afresh in an array of its own each time (small ones are slab views)', () => {
    for (const dims of [[1, 4, 2, 2], [3], [2, 5, 7], [64, 70]]) {
      for (const seed of [0, 9]) {
        const exact = probeValue({ name: 'r7', type: DataType.DOUBLE, dims }, seed, 1).data;
        const f32 = probeValue({ name: 'r7', type: DataType.FLOAT, dims }, seed, 1).data;
        const f16 = probeValue({ name: 'r7', type: DataType.FLOAT16, dims }, seed, 1).data;
        expect(Array.from(f32)).toEqual(Array.from(roundToStorage(Float64Array.from(exact), DataType.FLOAT)));
        expect(Array.from(f16)).toEqual(Array.from(roundToStorage(Float64Array.from(exact), DataType.FLOAT16)));
        expect(Array.from(f32)).toEqual(Array.from(exact, (v) => Math.fround(v)));
        // the same probe made again is equal, and a separate array: changing one leaves the other as it was
        const again = probeValue({ name: 'r7', type: DataType.FLOAT, dims }, seed, 1).data;
        expect(Array.from(again)).toEqual(Array.from(f32));
        again.fill(0);
        expect(Array.from(f32)).toEqual(Array.from(exact, (v) => Math.fround(v)));
      }
    }
  });
});
