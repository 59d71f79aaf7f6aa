// Unique. Outside check: onnxruntime-node (graph optimizations off) on seeded random tensors with repeated
// values and repeated slices, sorted and unsorted, flattened and along every axis; all four outputs.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, rng, vsOrt } from './ort-compare.js';

const outs = [{ name: 'y' }, { name: 'i', type: T.INT64 }, { name: 'inv', type: T.INT64 }, { name: 'n', type: T.INT64 }];

describe('Unique (outside check: onnxruntime-node)', () => {
  it('sorted and unsorted, no axis', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const x = { name: 'x', dims, data: randInt(r, count(dims), -3, 3) };
      for (const sorted of [0, 1]) await vsOrt('Unique', 11, [x], { sorted }, outs);
    }
  });

  it('slices along every axis (sorted), with repeated slices', async () => {
    for (const seed of SEEDS) {
      const r = rng(10 + seed);
      const dims = randShape(r, 1, 3);
      // values in {0, 1} make equal slices likely
      const x = { name: 'x', dims, data: randInt(r, count(dims), 0, 1) };
      for (let axis = 0; axis < dims.length; axis++) await vsOrt('Unique', 11, [x], { axis, sorted: 1 }, outs);
    }
  });
});
