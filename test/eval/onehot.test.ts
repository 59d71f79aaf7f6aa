// OneHot. Outside check: onnxruntime-node (graph optimizations off) on seeded random index shapes, axes and
// depths, negative and out-of-range indices.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, rng, vsOrt } from './ort-compare.js';

describe('OneHot (outside check: onnxruntime-node)', () => {
  it('every axis, negative and out-of-range indices', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 0, 3);
      const depth = 1 + Math.floor(r() * 5);
      const idx = randInt(r, count(dims), -depth - 1, depth);
      for (let axis = -dims.length - 1; axis <= dims.length; axis++) {
        await vsOrt('OneHot', 11, [
          { name: 'i', dims, data: idx, type: T.INT64 },
          { name: 'd', dims: [], data: [depth], type: T.INT64, init: true },
          { name: 'v', dims: [2], data: [-0.5, 2], init: true },
        ], { axis });
      }
    }
  });
});
