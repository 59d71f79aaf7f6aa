// GatherElements and GatherND. Outside check: onnxruntime-node (graph optimizations off) on seeded random
// shapes, axes, batch_dims and negative indices.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('GatherElements (outside check: onnxruntime-node)', () => {
  it('every axis, negative indices', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      for (let axis = 0; axis < dims.length; axis++) {
        const idims = dims.map((d, k) => (k === axis ? 1 + Math.floor(r() * 4) : Math.max(1, d - Math.floor(r() * 2))));
        const idx = randInt(r, count(idims), -dims[axis]!, dims[axis]! - 1);
        await vsOrt('GatherElements', 13, [x, { name: 'i', dims: idims, data: idx, type: T.INT64 }], { axis: r() < 0.5 ? axis : axis - dims.length });
      }
    }
  });
});

describe('GatherND (outside check: onnxruntime-node)', () => {
  it('index depths 1..rank-b, batch_dims 0..2', async () => {
    for (const seed of SEEDS) {
      const r = rng(20 + seed);
      const dims = randShape(r, 2, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      for (let b = 0; b < Math.min(3, dims.length); b++) {
        const m = 1 + Math.floor(r() * (dims.length - b));
        const mid = randShape(r, 0, 2, 3);
        const idims = [...dims.slice(0, b), ...mid, m];
        const idx: number[] = [];
        for (let t = 0; t < count(idims) / m; t++) for (let j = 0; j < m; j++) idx.push(randInt(r, 1, -dims[b + j]!, dims[b + j]! - 1)[0]!);
        await vsOrt('GatherND', 13, [x, { name: 'i', dims: idims, data: idx, type: T.INT64 }], { batch_dims: b });
      }
    }
  });
});
