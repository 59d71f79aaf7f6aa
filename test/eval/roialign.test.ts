// RoiAlign. Outside check: onnxruntime-node (graph optimizations off) on seeded random feature maps and regions
// (some partly outside the map), both coordinate_transformation_mode values, avg and max, fixed and adaptive
// sampling ratios, and the opset 10 form.
import { describe, it } from 'vitest';
import { f } from '../helpers/build.js';
import { SEEDS, T, count, randn, rng, vsOrt, type In } from './ort-compare.js';

describe('RoiAlign (outside check: onnxruntime-node)', () => {
  it('half_pixel and output_half_pixel, avg and max, opsets 10 and 16', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const N = 1 + Math.floor(r() * 2), C = 1 + Math.floor(r() * 3), H = 3 + Math.floor(r() * 6), W = 3 + Math.floor(r() * 6);
      const R = 1 + Math.floor(r() * 4);
      const scale = r() < 0.5 ? 1 : 0.5;
      const rois: number[] = [];
      for (let k = 0; k < R; k++) {
        const x1 = (r() * W - 1) / scale, y1 = (r() * H - 1) / scale;
        rois.push(x1, y1, x1 + (r() * W) / scale, y1 + (r() * H) / scale);
      }
      const ins: In[] = [
        { name: 'x', dims: [N, C, H, W], data: randn(r, N * C * H * W) },
        { name: 'rois', dims: [R, 4], data: rois },
        { name: 'b', dims: [R], data: Array.from({ length: R }, () => Math.floor(r() * N)), type: T.INT64 },
      ];
      const attrs = { output_height: 1 + Math.floor(r() * 3), output_width: 1 + Math.floor(r() * 3), sampling_ratio: Math.floor(r() * 3), spatial_scale: f(scale) };
      for (const mode of ['avg', 'max']) {
        for (const ctm of ['half_pixel', 'output_half_pixel']) await vsOrt('RoiAlign', 16, ins, { ...attrs, mode, coordinate_transformation_mode: ctm });
        await vsOrt('RoiAlign', 10, ins, { ...attrs, mode });
      }
      void count;
    }
  });
});
