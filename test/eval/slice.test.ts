// Slice against onnxruntime-node: attribute form (opset < 10) and input form (>= 10) with random starts/ends
// beyond the bounds (clamping), negative indices, default axes and negative steps.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Slice (outside check: onnxruntime-node)', () => {
  it('random starts/ends/axes/steps, both forms', async () => {
    for (const seed of [...SEEDS, 7, 8, 9, 10]) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4, 6);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const axes = dims.map((_, i) => i).filter(() => r() < 0.7);
      if (axes.length === 0) axes.push(0);
      const pick = () => Math.floor(r() * 16) - 8; // often out of range on either side
      const starts = axes.map(pick), ends = axes.map(pick);
      const steps = axes.map(() => (r() < 0.5 ? 1 : [-1, 2, -2, 3][Math.floor(r() * 4)]!));
      await vsOrt('Slice', 9, [x], { starts, ends, axes });
      const i64 = (name: string, v: number[]) => ({ name, dims: [v.length], data: v, type: T.INT64, init: true });
      await vsOrt('Slice', 13, [x, i64('s', starts), i64('e', ends), i64('a', axes.map((a) => (r() < 0.5 ? a - dims.length : a))), i64('t', steps)]);
      if (axes.length === dims.length) await vsOrt('Slice', 10, [x, i64('s', starts), i64('e', ends)]);
    }
  });

  it('reverses an axis with step -1 and the int64 extremes as ends', async () => {
    const x = { name: 'x', dims: [3, 4], data: Float32Array.from({ length: 12 }, (_, i) => i) };
    const i64 = (name: string, v: number[]) => ({ name, dims: [v.length], data: v, type: T.INT64, init: true });
    await vsOrt('Slice', 13, [x, i64('s', [-1]), i64('e', [-(2 ** 62)]), i64('a', [1]), i64('t', [-1])]);
    await vsOrt('Slice', 13, [x, i64('s', [1]), i64('e', [2 ** 62]), i64('a', [0])]);
  });
});
