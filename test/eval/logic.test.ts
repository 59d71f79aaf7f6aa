// Comparisons, boolean logic and Where against onnxruntime-node with broadcasting on seeded random shapes.
import { describe, it } from 'vitest';
import { SEEDS, T, bcastShape, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('comparisons, logic, Where (outside check: onnxruntime-node)', () => {
  for (const [op, opset] of [['Equal', 13], ['Less', 13], ['Greater', 13], ['LessOrEqual', 16], ['GreaterOrEqual', 16], ['Equal', 11], ['Less', 9]] as const) {
    it(`${op}@${opset} on float and int64 inputs`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const a = randShape(r), b = bcastShape(r, a);
        const fa = Float32Array.from(randInt(r, count(a), -2, 2)), fb = Float32Array.from(randInt(r, count(b), -2, 2)); // ties happen
        await vsOrt(op, opset, [{ name: 'a', dims: a, data: fa }, { name: 'b', dims: b, data: fb }], {}, [{ name: 'y', type: T.BOOL }]);
                await vsOrt(op, opset, [{ name: 'a', dims: b, data: fb, type: T.INT64 }, { name: 'b', dims: a, data: fa, type: T.INT64 }], {}, [{ name: 'y', type: T.BOOL }]);
      }
    });
  }

  for (const op of ['And', 'Or', 'Xor']) {
    it(`${op} on broadcast bool tensors; Not`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const a = randShape(r), b = bcastShape(r, a);
        // bool tensors go in as initializers: the onnxruntime-node feed helper has no bool tensor type
        const x = { name: 'a', dims: a, data: randInt(r, count(a), 0, 1), type: T.BOOL, init: true };
        const y = { name: 'b', dims: b, data: randInt(r, count(b), 0, 1), type: T.BOOL, init: true };
        await vsOrt(op, 7, [x, y], {}, [{ name: 'y', type: T.BOOL }]);
        await vsOrt('Not', 1, [x], {}, [{ name: 'y', type: T.BOOL }]);
      }
    });
  }

  it('IsNaN and IsInf (detect_negative / detect_positive)', async () => {
    const x = { name: 'x', dims: [2, 4], data: [NaN, Infinity, -Infinity, 0, 1.5, -2, NaN, Infinity] };
    const b = [{ name: 'y', type: T.BOOL }];
    await vsOrt('IsNaN', 13, [x], {}, b);
    await vsOrt('IsInf', 10, [x], {}, b);
    await vsOrt('IsInf', 10, [x], { detect_negative: 0 }, b);
    await vsOrt('IsInf', 10, [x], { detect_positive: 0 }, b);
  });

  it('Where with three-way broadcasting, float and int64 values', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      const c = bcastShape(r, dims), x = bcastShape(r, dims);
      const cond = { name: 'c', dims: c, data: randInt(r, count(c), 0, 1), type: T.BOOL, init: true };
      await vsOrt('Where', 16, [cond, { name: 'x', dims: x, data: randn(r, count(x)) }, { name: 'y', dims, data: randn(r, count(dims)) }], {}, [{ name: 'z' }]);
      await vsOrt('Where', 9, [cond, { name: 'x', dims, data: randInt(r, count(dims), -5, 5), type: T.INT64 }, { name: 'y', dims: x, data: randInt(r, count(x), -5, 5), type: T.INT64 }], {}, [{ name: 'z', type: T.INT64 }]);
    }
  });
});
