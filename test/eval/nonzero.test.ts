// NonZero and Compress. Outside check: onnxruntime-node (graph optimizations off) on seeded random shapes with
// many zeros, every axis and no axis, conditions shorter than the axis.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, rng, vsOrt } from './ort-compare.js';

describe('NonZero (outside check: onnxruntime-node)', () => {
  it('random shapes of rank 1-4 with about half zeros', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      await vsOrt('NonZero', 13, [{ name: 'x', dims, data: randInt(r, count(dims), -1, 1) }], {}, [{ name: 'y', type: T.INT64 }]);
    }
  });
});

describe('Compress (outside check: onnxruntime-node)', () => {
  it('every axis and the flattened form', async () => {
    for (const seed of SEEDS) {
      const r = rng(10 + seed);
      const dims = randShape(r, 1, 3);
      const x = { name: 'x', dims, data: randInt(r, count(dims), -9, 9) };
      for (let axis = -1; axis < dims.length; axis++) {
        const len = axis < 0 ? count(dims) : dims[axis]!;
        const n = 1 + Math.floor(r() * len);
        const c = { name: 'c', dims: [n], data: randInt(r, n, 0, 1), type: T.BOOL, init: true };
        await vsOrt('Compress', 11, [x, c], axis < 0 ? {} : { axis: r() < 0.5 ? axis : axis - dims.length });
      }
    }
  });
});
