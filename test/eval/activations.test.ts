// Activations against onnxruntime-node on seeded random shapes: every attribute form, Clip's attribute (<11)
// and input (>=11) forms, and PRelu's broadcast slope.
import { describe, it } from 'vitest';
import { f } from '../helpers/build.js';
import { SEEDS, T, bcastShape, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('activations (outside check: onnxruntime-node)', () => {
  const forms: Array<[string, number, Record<string, ReturnType<typeof f>>]> = [
    ['Relu', 14, {}],
    ['LeakyRelu', 16, {}],
    ['LeakyRelu', 7, { alpha: f(0.2) }],
    ['Elu', 7, {}],
    ['Elu', 7, { alpha: f(0.7) }],
    ['Selu', 7, {}],
    ['Selu', 7, { alpha: f(1.5), gamma: f(2.5) }],
    ['HardSigmoid', 7, {}],
    ['HardSigmoid', 7, { alpha: f(0.3), beta: f(0.4) }],
    ['HardSwish', 14, {}],
    ['Celu', 12, {}],
    ['Celu', 12, { alpha: f(0.5) }],
    ['ThresholdedRelu', 10, {}],
    ['ThresholdedRelu', 10, { alpha: f(0.3) }],
    ['Shrink', 9, {}],
    ['Shrink', 9, { lambd: f(1.5), bias: f(0.25) }],
    ['Softplus', 7, {}],
    ['Clip', 10, {}],
    ['Clip', 10, { min: f(-0.5), max: f(0.75) }],
    ['Clip', 10, { min: f(0.1) }],
  ];
  for (const [op, opset, attrs] of forms) {
    it(`${op}@${opset} ${JSON.stringify(attrs)}`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const dims = randShape(r);
        await vsOrt(op, opset, [{ name: 'x', dims, data: randn(r, count(dims), 4) }], attrs);
      }
    });
  }

  it('Clip input form (opset 11, 13): both bounds, one bound, none, min > max, int32', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const x = { name: 'x', dims, data: randn(r, count(dims), 2) };
      const lo = { name: 'lo', dims: [], data: [-0.5 + r() * 0.2], init: true };
      const hi = { name: 'hi', dims: [], data: [0.5 + r() * 0.2], init: true };
      await vsOrt('Clip', 11, [x, lo, hi]);
      await vsOrt('Clip', 13, [x, { ...lo, name: '' }, hi]);
      await vsOrt('Clip', 13, [x, lo]);
      await vsOrt('Clip', 13, [x]);
      await vsOrt('Clip', 13, [x, hi, { ...lo, name: 'lo2' }]); // min > max: every element becomes max
      const xi = { name: 'x', dims, data: randInt(r, count(dims), -20, 20), type: T.INT32 };
      await vsOrt('Clip', 13, [xi, { name: 'lo', dims: [], data: [-5], type: T.INT32, init: true }, { name: 'hi', dims: [], data: [7], type: T.INT32, init: true }], {}, [{ name: 'y', type: T.INT32 }]);
    }
  });

  it('PRelu with a slope broadcast against the input (opsets 9 and 16)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      const sd = bcastShape(r, dims);
      await vsOrt('PRelu', seed % 2 ? 9 : 16, [
        { name: 'x', dims, data: randn(r, count(dims)) },
        { name: 's', dims: sd, data: randn(r, count(sd), 0.5), init: seed % 3 === 0 },
      ]);
    }
  });
});
