// Add, Sub, Mul, Div, Pow against onnxruntime-node on seeded random broadcasting shapes, plus the legacy
// (opset < 7) broadcast attribute against the worked example in the ONNX Add-6 operator docs.
import { describe, expect, it } from 'vitest';
import { SEEDS, T, bcastShape, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';
import { Add, Div } from '../../src/eval/kernels/binary.js';
import type { Node } from '../../src/graph/ir.js';
import type { KernelContext, Value } from '../../src/eval/value.js';

function ctxFor(node: Partial<Node>, opset: number): KernelContext {
  const n: Node = { name: 'n', opType: 'Add', domain: '', inputs: [], outputs: ['y'], attributes: [], docString: '', extra: [], ...node };
  return { node: n, opset, precision: 'float64', runSubgraph: () => [] };
}
const intAttr = (name: string, i: number) => ({ name, value: { type: 'INT' as const, i }, docString: '', refAttrName: '', extra: [] });

describe('binary arithmetic (outside check: onnxruntime-node)', () => {
  for (const op of ['Add', 'Sub', 'Mul', 'Div']) {
    it(`${op} float32 with broadcasting, opsets 7 and 14`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const a = randShape(r), b = bcastShape(r, a);
        const [x, y] = r() < 0.5 ? [a, b] : [b, a];
        const yData = randn(r, count(y)).map((v) => (op === 'Div' ? Math.sign(v || 1) * (0.5 + Math.abs(v)) : v));
        await vsOrt(op, seed % 2 ? 7 : 14, [
          { name: 'a', dims: x, data: randn(r, count(x)) },
          { name: 'b', dims: y, data: yData },
        ]);
      }
    });
  }

  it('integer Div truncates toward zero and Sub/Mul stay exact (int64, int32)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      for (const type of [T.INT64, T.INT32]) {
        const a = { name: 'a', dims, data: randInt(r, count(dims), -50, 50), type };
        const b = { name: 'b', dims, data: randInt(r, count(dims), 1, 7).map((v, i) => (i % 2 ? -v : v)), type };
        for (const op of ['Div', 'Sub', 'Mul', 'Add']) await vsOrt(op, 14, [a, b], {}, [{ name: 'y', type }]);
      }
    }
  });

  it('int32 Mul and Add wrap around like onnxruntime (two\'s complement)', async () => {
    const big = [2 ** 30 + 12345, -(2 ** 31), 2 ** 31 - 1, 99991];
    const a = { name: 'a', dims: [4], data: big, type: T.INT32 };
    const b = { name: 'b', dims: [4], data: [7, 3, 2, 2 ** 30 + 1], type: T.INT32 };
    await vsOrt('Mul', 14, [a, b], {}, [{ name: 'y', type: T.INT32 }]);
    await vsOrt('Add', 14, [a, b], {}, [{ name: 'y', type: T.INT32 }]);
  });

  it('Mod: integer modulo takes the divisor sign (fmod=0), fmod=1 takes the dividend sign', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const b = bcastShape(r, dims);
      const divisor = randInt(r, count(b), 1, 6).map((v, i) => (i % 2 ? -v : v));
      for (const type of [T.INT64, T.INT32]) {
        await vsOrt('Mod', 13, [{ name: 'a', dims, data: randInt(r, count(dims), -30, 30), type }, { name: 'b', dims: b, data: divisor, type }], {}, [{ name: 'y', type }]);
        await vsOrt('Mod', 13, [{ name: 'a', dims, data: randInt(r, count(dims), -30, 30), type }, { name: 'b', dims: b, data: divisor, type }], { fmod: 1 }, [{ name: 'y', type }]);
      }
      await vsOrt('Mod', 10, [{ name: 'a', dims, data: randn(r, count(dims), 10) }, { name: 'b', dims: b, data: divisor }], { fmod: 1 });
    }
  });

  it('Pow with float and integer exponents, and an int32 base (opsets 7, 12, 15)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const base = randn(r, count(dims)).map((v) => 0.2 + Math.abs(v));
      await vsOrt('Pow', 7, [{ name: 'a', dims, data: base }, { name: 'b', dims: [], data: [r() * 3 - 1.5] }]);
      await vsOrt('Pow', 12, [{ name: 'a', dims, data: randn(r, count(dims)) }, { name: 'b', dims: [1], data: [3], type: T.INT64 }]);
      await vsOrt('Pow', 15, [{ name: 'a', dims, data: randInt(r, count(dims), -4, 4), type: T.INT32 }, { name: 'b', dims: [], data: [2], type: T.INT32 }], {}, [{ name: 'y', type: T.INT32 }]);
    }
  });

  it('legacy broadcast=1 with axis places B at that axis (ONNX Add-6 docs: A (2,3,4,5) + B (3,4), axis=1)', () => {
    const a: Value = { type: T.FLOAT, dims: [2, 3, 4, 5], data: new Float64Array(120) };
    const b: Value = { type: T.FLOAT, dims: [3, 4], data: Float64Array.from({ length: 12 }, (_, i) => i) };
    const [y] = Add.run([a, b], ctxFor({ attributes: [intAttr('broadcast', 1), intAttr('axis', 1)] }, 6));
    expect(y!.dims).toEqual([2, 3, 4, 5]);
    // element (n, c, h, w) = b[c, h]
    expect(y!.data[((1 * 3 + 2) * 4 + 3) * 5 + 4]).toBe(2 * 4 + 3);
    expect(() => Add.run([a, b], ctxFor({}, 6))).toThrow(/broadcast=0/);
  });

  it('integer division by zero yields 0 rather than a non-integer (ONNX leaves it undefined)', () => {
    const a: Value = { type: T.INT64, dims: [2], data: Float64Array.of(7, -7) };
    const b: Value = { type: T.INT64, dims: [2], data: Float64Array.of(0, 2) };
    expect(Array.from(Div.run([a, b], ctxFor({ opType: 'Div' }, 14))[0]!.data)).toEqual([0, -3]);
  });
});
