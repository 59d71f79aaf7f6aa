// Transpose against onnxruntime-node: random permutations of seeded random shapes, and the default (reversed).
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Transpose (outside check: onnxruntime-node)', () => {
  it('random permutations and the default perm, float and int64', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 5);
      const perm = dims.map((_, i) => i).sort(() => r() - 0.5);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      await vsOrt('Transpose', 13, [x], { perm });
      await vsOrt('Transpose', 7, [x]);
      await vsOrt('Transpose', 13, [{ name: 'x', dims, data: randInt(r, count(dims), -9, 9), type: T.INT64 }], { perm }, [{ name: 'y', type: T.INT64 }]);
    }
  });
});
