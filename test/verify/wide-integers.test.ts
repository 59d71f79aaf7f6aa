// int64/uint64 values beyond 2^53, which float64 (the evaluator's value store) cannot hold exactly (IEEE 754
// binary64: a 53-bit significand). Given model inputs beyond 2^53 are refused, naming the input and the exact
// value; integer outputs at or beyond 2^53 are refused by evaluate and skipped (`wide-integers`) by compare;
// INT64_MAX/INT64_MIN sentinels inside the model keep working. onnxruntime-node, which holds int64 exactly, shows
// what float64 would have got wrong.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import * as ort from 'onnxruntime-node';
import { GraphBuilder, modelBytes, rng, T } from '../helpers/build.js';
import { npyInt64 } from '../helpers/npy.js';
import { parseModel } from '../../src/onnx/read.js';
import { loadInputFile, resolveInputs, type InputValue } from '../../src/verify/inputs.js';
import { evaluate } from '../../src/verify/evaluate.js';
import { compare } from '../../src/verify/compare.js';
import { PleatError } from '../../src/errors.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-wide-'));
const LIMIT = 2n ** 53n;

function refusal(f: () => unknown): PleatError {
  try { f(); } catch (e) { expect(e).toBeInstanceOf(PleatError); expect((e as Error).message).not.toContain('\n'); return e as PleatError; }
  throw new Error('expected a refusal');
}

/** y = x + one (int64), x [n] an input. */
function addOne(n: number, one = 1) {
  const g = new GraphBuilder();
  g.input('x', [n], T.INT64).output('y', [n], T.INT64);
  g.init('one', [1], [one], T.INT64);
  g.node('Add', ['x', 'one'], {}, { name: 'add', outputs: ['y'] });
  return g;
}

/** A random 64-bit integer of magnitude at most 2^53 (r() gives 32 random bits twice). */
function inRange(r: () => number): bigint {
  const v = (BigInt(Math.floor(r() * 2 ** 21)) << 32n) | BigInt(Math.floor(r() * 2 ** 32));
  return r() < 0.5 ? -v : v;
}

/** A random 64-bit integer beyond 2^53 that fits int64 (or, unsigned, uint64). */
function beyond(r: () => number, signed: boolean): bigint {
  const top = signed ? 2n ** 63n - 1n : 2n ** 64n - 1n;
  const span = top - LIMIT;
  const v = LIMIT + 1n + ((BigInt(Math.floor(r() * 2 ** 32)) << 32n | BigInt(Math.floor(r() * 2 ** 32))) % span);
  return signed && r() < 0.5 ? -v : v;
}

describe('a given int64/uint64 input beyond 2^53 is refused, naming the input and the exact value', () => {
  it('seeded arrays in .npy, raw .pb and typed .pb files: the first element beyond 2^53 is named; arrays within +-2^53 load exactly', () => {
    const m = parseModel(modelBytes(addOne(12)), dir);
    for (let seed = 1; seed <= 24; seed++) {
      const r = rng(seed + 50);
      const vals = Array.from({ length: 12 }, () => inRange(r));
      if (seed % 4 === 0) vals[Math.floor(r() * 12)] = seed % 8 === 0 ? LIMIT : -LIMIT; // 2^53 itself is exact
      const bad = seed % 3 !== 0 ? Math.floor(r() * 12) : -1;
      if (bad >= 0) {
        vals[bad] = seed % 5 === 0 ? LIMIT + 1n : beyond(r, true); // 2^53 + 1 rounds to 2^53 in float64
        for (let k = bad + 1; k < 12; k++) if (r() < 0.3) vals[k] = beyond(r, true);
      }
      const arr = BigInt64Array.from(vals);
      const form = ['npy', 'raw', 'typed'][seed % 3]!;
      const file = join(dir, `x${seed}.${form === 'npy' ? 'npy' : 'pb'}`);
      if (form === 'npy') writeFileSync(file, npyInt64([12], arr));
      else {
        const t: onnxProto.onnx.ITensorProto = { name: 'x', dims: [12], dataType: T.INT64 };
        if (form === 'raw') t.rawData = new Uint8Array(arr.buffer);
        else t.int64Data = vals.map((v) => v.toString()) as never;
        writeFileSync(file, onnxProto.onnx.TensorProto.encode(t).finish());
      }
      const given = new Map<string, InputValue>([['x', loadInputFile(file)]]);
      if (bad < 0) {
        expect(resolveInputs(m.graph, given)[0]!.given!.data, `seed ${seed} ${form}`).toEqual(Float64Array.from(vals, Number));
        expect(Array.from(given.get('x')!.data, (v) => BigInt(v)), `seed ${seed} ${form}: exact`).toEqual(vals);
        continue;
      }
      const e = refusal(() => resolveInputs(m.graph, given));
      expect(e.kind).toBe('bad-input');
      expect(e.message, `seed ${seed} ${form}`).toContain(`input 'x': ${file} holds ${vals[bad]!.toString()} (element ${bad}), beyond 2^53`);
    }
  });

  it('uint64 from a .npy file, and a float64 value a library caller gives', () => {
    const g = new GraphBuilder();
    g.input('x', [2], T.UINT64).output('y', [2], T.UINT64);
    g.node('Identity', ['x'], {}, { name: 'id', outputs: ['y'] });
    const m = parseModel(modelBytes(g), dir);
    const file = join(dir, 'u.npy');
    writeFileSync(file, npyInt64([2], BigUint64Array.from([5n, 2n ** 63n + 7n])));
    expect(refusal(() => resolveInputs(m.graph, new Map([['x', loadInputFile(file)]]))).message).toContain(`holds ${(2n ** 63n + 7n).toString()} (element 1)`);
    const m64 = parseModel(modelBytes(addOne(2)), dir);
    const lib = (a: number, b: number): Map<string, InputValue> => new Map([['x', { type: T.INT64, dims: [2], data: Float64Array.from([a, b]) }]]);
    expect(refusal(() => resolveInputs(m64.graph, lib(3, 2 ** 54))).message).toContain(`the given value holds ${(2n ** 54n).toString()} (element 1)`);
    expect(resolveInputs(m64.graph, lib(-(2 ** 53), 2 ** 53))[0]!.given).toBeDefined();
  });
});

describe('an integer output at or beyond 2^53', () => {
  it('evaluate refuses it, naming the output; onnxruntime-node shows the exact sum that float64 rounds', async () => {
    const bytes = modelBytes(addOne(3, 2));
    const m = parseModel(bytes, dir);
    const x = [2n ** 53n - 1n, 5n, -7n];
    // onnxruntime-node holds int64 exactly: (2^53 - 1) + 2 = 2^53 + 1, which float64 holds as 2^53
    const s = await ort.InferenceSession.create(bytes, { graphOptimizationLevel: 'disabled' });
    const exact = (await s.run({ x: new ort.Tensor('int64', BigInt64Array.from(x), [3]) })).y!.data as BigInt64Array;
    await s.release();
    expect(exact[0]).toBe(2n ** 53n + 1n);
    expect(Number(exact[0]!)).toBe(2 ** 53);
    const given = (v: bigint[]) => ({ inputs: new Map<string, InputValue>([['x', { type: T.INT64, dims: [3], data: Float64Array.from(v, Number) }]]) });
    const e = refusal(() => evaluate(m, given(x)));
    expect(e.message).toBe(`output 'y' holds ${(2n ** 53n).toString()} (element 0), at or beyond 2^53 = ${2 ** 53}: pleat's evaluator holds integers in float64, which may have rounded it; nothing saved`);
    // below 2^53 everywhere: runs, exactly as onnxruntime-node
    const ok = evaluate(m, given([2n ** 53n - 3n, -(2n ** 53n) + 1n, 0n])).outputs.get('y')!;
    expect(Array.from(ok.data)).toEqual([2 ** 53 - 1, -(2 ** 53) + 3, 2]);
  });

  it('compare: that output is skipped with reason wide-integers, never passed; other outputs are still judged', () => {
    const g = new GraphBuilder();
    g.input('x', [4], T.INT64).input('f', [3]).output('y', [4], T.INT64).output('z', [3]);
    g.init('big', [1], [2 ** 60], T.INT64);
    g.node('Add', ['x', 'big'], {}, { name: 'add', outputs: ['y'] });
    g.node('Relu', ['f'], {}, { name: 'relu', outputs: ['z'] });
    const m = parseModel(modelBytes(g), dir);
    const r = compare(m, m, {});
    expect(r.status).toBe('skipped');
    expect(r.passed).toBe(false);
    expect(r.skipped!.reason).toBe('wide-integers');
    const y = r.outputs.find((o) => o.name === 'y')!, z = r.outputs.find((o) => o.name === 'z')!;
    expect([y.status, y.passed]).toEqual(['wide-integers', false]);
    expect(y.problem).toMatch(/^output 'y' holds \d+ \(model A, probe 0, element 0\), at or beyond 2\^53/);
    expect([z.status, z.passed]).toEqual(['compared', true]);
  });
});

describe('INT64_MAX / INT64_MIN sentinels inside the model keep working', () => {
  it('Slice with ends = INT64_MAX (initializer) and starts = INT64_MIN (Constant) and a negative step, vs onnxruntime-node', async () => {
    const g = new GraphBuilder();
    g.input('x', [3, 5]).output('y').output('w');
    const MAX = 9223372036854775807n, MIN = -9223372036854775808n;
    const big = (name: string, v: bigint): onnxProto.onnx.ITensorProto => {
      const b = new BigInt64Array([v]);
      return { name, dims: [1], dataType: T.INT64, rawData: new Uint8Array(b.buffer) };
    };
    g.init('s', [1], [1], T.INT64); g.init('ax', [1], [1], T.INT64); g.init('neg', [1], [-1], T.INT64); g.init('hi', [1], [3], T.INT64);
    g.node('Constant', [], { value: big('lo', MIN) }, { name: 'lo', outputs: ['lo'] });
    g.node('Constant', [], { value: big('e', MAX) }, { name: 'e', outputs: ['e'] });
    g.node('Slice', ['x', 's', 'e', 'ax'], {}, { name: 'to_end', outputs: ['y'] });
    g.node('Slice', ['x', 'hi', 'lo', 'ax', 'neg'], {}, { name: 'backwards', outputs: ['w'] });
    const bytes = modelBytes(g, { opset: 13 });
    const data = Float32Array.from({ length: 15 }, (_, i) => i - 4);
    const s = await ort.InferenceSession.create(bytes, { graphOptimizationLevel: 'disabled' });
    const want = await s.run({ x: new ort.Tensor('float32', data, [3, 5]) });
    await s.release();
    const m = parseModel(bytes, dir);
    const got = evaluate(m, { inputs: new Map([['x', { type: T.FLOAT, dims: [3, 5], data: Float64Array.from(data) }]]) }).outputs;
    for (const k of ['y', 'w']) {
      expect(got.get(k)!.dims, k).toEqual([...want[k]!.dims]);
      expect(Array.from(got.get(k)!.data), k).toEqual(Array.from(want[k]!.data as Float32Array));
    }
    expect(compare(m, m, {}).status).toBe('passed');
  });
});
