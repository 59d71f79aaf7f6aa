// Trilu. Outside check: onnxruntime-node (graph optimizations off) on seeded random batched matrices, upper and
// lower, k from below the last row to beyond the last column.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Trilu (outside check: onnxruntime-node)', () => {
  it('upper and lower, k in [-rows-1, cols+1], with and without k', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = [...randShape(r, 0, 2, 3), 1 + Math.floor(r() * 5), 1 + Math.floor(r() * 5)];
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const rows = dims[dims.length - 2]!, cols = dims[dims.length - 1]!;
      for (const upper of [0, 1]) {
        await vsOrt('Trilu', 14, [x], { upper });
        const k = -rows - 1 + Math.floor(r() * (rows + cols + 3));
        await vsOrt('Trilu', 14, [x, { name: 'k', dims: [], data: [k], type: T.INT64, init: true }], { upper });
      }
    }
  });
});
