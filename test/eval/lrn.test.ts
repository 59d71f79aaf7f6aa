// LRN and MeanVarianceNormalization. Outside check: onnxruntime-node (graph optimizations off) on seeded random
// shapes, window sizes and attributes.
import { describe, it } from 'vitest';
import { f } from '../helpers/build.js';
import { SEEDS, count, randn, rng, vsOrt } from './ort-compare.js';

describe('LRN (outside check: onnxruntime-node)', () => {
  // onnxruntime accepts odd sizes only; even sizes follow the same window formula (floor/ceil of (size-1)/2)
  it('odd sizes, default and random alpha/beta/bias', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = [1 + Math.floor(r() * 2), 1 + Math.floor(r() * 6), 1 + Math.floor(r() * 4), 1 + Math.floor(r() * 4)];
      const x = { name: 'x', dims, data: randn(r, count(dims), 3) };
      const size = 1 + 2 * Math.floor(r() * 3);
      await vsOrt('LRN', 13, [x], { size });
      await vsOrt('LRN', 1, [x], { size, alpha: f(0.01 + r() * 0.1), beta: f(0.5 + r()), bias: f(0.5 + r() * 2) });
    }
  });
});

describe('MeanVarianceNormalization (outside check: onnxruntime-node)', () => {
  it('default axes and random axis sets', async () => {
    for (const seed of SEEDS) {
      const r = rng(10 + seed);
      const dims = [1 + Math.floor(r() * 2), 1 + Math.floor(r() * 3), 1 + Math.floor(r() * 4), 2 + Math.floor(r() * 4)];
      const x = { name: 'x', dims, data: randn(r, count(dims), 2, 1) };
      await vsOrt('MeanVarianceNormalization', 13, [x]);
      const axes = [0, 1, 2, 3].filter(() => r() < 0.5);
      if (axes.length === 0) axes.push(3);
      await vsOrt('MeanVarianceNormalization', 9, [x], { axes }, undefined, 1e-5);
    }
  });
});
