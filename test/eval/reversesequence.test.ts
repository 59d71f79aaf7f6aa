// ReverseSequence. Outside check: onnxruntime-node (graph optimizations off) on seeded random shapes, both axis
// layouts and random sequence lengths (0 to the full length).
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randn, rng, vsOrt } from './ort-compare.js';

describe('ReverseSequence (outside check: onnxruntime-node)', () => {
  it('time-major and batch-major, rank 2-4', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const rank = 2 + Math.floor(r() * 3);
      const dims = Array.from({ length: rank }, () => 1 + Math.floor(r() * 4));
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      for (const [t, b] of [[0, 1], [1, 0]] as const) {
        const lens = randInt(r, dims[b]!, 0, dims[t]!);
        await vsOrt('ReverseSequence', 10, [x, { name: 'l', dims: [dims[b]!], data: lens, type: T.INT64, init: true }], { time_axis: t, batch_axis: b });
      }
    }
  });
});
