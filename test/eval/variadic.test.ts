// Sum, Max, Min, Mean over 1-4 broadcasting inputs against onnxruntime-node on seeded random shapes.
import { describe, it } from 'vitest';
import { SEEDS, T, bcastShape, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('variadic Sum/Max/Min/Mean (outside check: onnxruntime-node)', () => {
  for (const op of ['Sum', 'Max', 'Min', 'Mean']) {
    it(`${op} at opsets 8 and 13, float; int64 for Max/Min`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const dims = randShape(r, 1, 4);
        const n = 1 + (seed % 4);
        const ins = Array.from({ length: n }, (_, k) => {
          const d = k === 0 ? dims : bcastShape(r, dims);
          return { name: `x${k}`, dims: d, data: randn(r, count(d)) };
        });
        await vsOrt(op, seed % 2 ? 8 : 13, ins);
        if (op === 'Max' || op === 'Min') {
          const ii = ins.map((i) => ({ ...i, data: randInt(r, count(i.dims), -9, 9), type: T.INT64 }));
          await vsOrt(op, 13, ii, {}, [{ name: 'y', type: T.INT64 }]);
        }
      }
    });
  }
});
