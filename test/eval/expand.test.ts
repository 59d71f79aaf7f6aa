// Expand and Tile against onnxruntime-node on seeded random shapes (Expand both ways, with added leading axes).
import { describe, it } from 'vitest';
import { SEEDS, T, bcastShape, count, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Expand / Tile (outside check: onnxruntime-node)', () => {
  it('Expand to a broadcast-compatible shape, smaller and larger rank', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const big = randShape(r, 1, 4);
      const small = bcastShape(r, big);
      const shape = big.map((d) => (r() < 0.3 ? 1 : d));
      const x = { name: 'x', dims: small, data: randn(r, count(small)) };
      for (const s of [big, shape, [2, ...big]]) await vsOrt('Expand', 13, [x, { name: 's', dims: [s.length], data: s, type: T.INT64, init: true }]);
    }
  });

  it('Tile with random repeats (including 0 and 1)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const reps = dims.map(() => Math.floor(r() * 3));
      if (reps.every((v) => v === 0)) reps[0] = 2;
      await vsOrt('Tile', 13, [{ name: 'x', dims, data: randn(r, count(dims)) }, { name: 'r', dims: [reps.length], data: reps, type: T.INT64, init: true }]);
    }
  });
});
