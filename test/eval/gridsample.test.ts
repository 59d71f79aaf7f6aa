// GridSample. Outside check: onnxruntime-node (graph optimizations off) on seeded random images and grids
// reaching past [-1, 1], every mode, padding_mode and align_corners value, in the opset 16 form (2-D) and the
// opset 20 form (mode names linear/nearest/cubic).
import { describe, it } from 'vitest';
import { uniform } from '../helpers/build.js';
import { SEEDS, count, randn, rng, vsOrt } from './ort-compare.js';

describe('GridSample (outside check: onnxruntime-node)', () => {
  it('every mode x padding x align_corners, opsets 16 and 20', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const N = 1 + Math.floor(r() * 2), C = 1 + Math.floor(r() * 2), H = 1 + Math.floor(r() * 5), W = 1 + Math.floor(r() * 5);
      const Ho = 1 + Math.floor(r() * 4), Wo = 1 + Math.floor(r() * 4);
      const x = { name: 'x', dims: [N, C, H, W], data: randn(r, N * C * H * W) };
      const grid = { name: 'g', dims: [N, Ho, Wo, 2], data: uniform(r, N * Ho * Wo * 2, -1.6, 1.6) };
      for (const [m16, m20] of [['bilinear', 'linear'], ['nearest', 'nearest'], ['bicubic', 'cubic']]) {
        for (const padding_mode of ['zeros', 'border', 'reflection']) {
          for (const align_corners of [0, 1]) {
            await vsOrt('GridSample', 16, [x, grid], { mode: m16!, padding_mode, align_corners }, undefined, 1e-5);
            await vsOrt('GridSample', 20, [x, grid], { mode: m20!, padding_mode, align_corners }, undefined, 1e-5);
          }
        }
      }
      void count;
    }
  });

  it('3-D volumes in the opset 20 form (linear and nearest)', async () => {
    for (const seed of SEEDS.slice(0, 3)) {
      const r = rng(40 + seed);
      const dims = [1, 2, 1 + Math.floor(r() * 3), 1 + Math.floor(r() * 4), 1 + Math.floor(r() * 4)];
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const grid = { name: 'g', dims: [1, 2, 3, 2, 3], data: uniform(r, 36, -1.4, 1.4) };
      for (const mode of ['linear', 'nearest']) {
        for (const padding_mode of ['zeros', 'border', 'reflection']) await vsOrt('GridSample', 20, [x, grid], { mode, padding_mode, align_corners: seed % 2 }, undefined, 1e-5);
      }
    }
  });
});
