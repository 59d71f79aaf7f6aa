// EyeLike. Outside check: onnxruntime-node (graph optimizations off) on seeded random 2-D shapes and diagonals,
// with and without dtype.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randn, rng, vsOrt } from './ort-compare.js';

describe('EyeLike (outside check: onnxruntime-node)', () => {
  it('k from below to above the matrix, float and int64 output', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = [1 + Math.floor(r() * 5), 1 + Math.floor(r() * 5)];
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const k = -dims[0]! + Math.floor(r() * (dims[0]! + dims[1]!));
      await vsOrt('EyeLike', 9, [x], { k });
      await vsOrt('EyeLike', 9, [x], { k, dtype: T.INT64 }, [{ name: 'y', type: T.INT64 }]);
    }
  });
});
