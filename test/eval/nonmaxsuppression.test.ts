// NonMaxSuppression. Outside check: onnxruntime-node (graph optimizations off) on seeded random boxes (both box
// formats, flipped corners), scores, IoU and score thresholds, and output limits.
import { describe, it } from 'vitest';
import { f } from '../helpers/build.js';
import { SEEDS, T, rng, vsOrt, type In } from './ort-compare.js';

describe('NonMaxSuppression (outside check: onnxruntime-node)', () => {
  it('random clusters of boxes, both formats, with and without score threshold', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const B = 1 + Math.floor(r() * 2), K = 1 + Math.floor(r() * 8), classes = 1 + Math.floor(r() * 3);
      for (const center of [0, 1]) {
        const boxes: number[] = [];
        for (let i = 0; i < B * K; i++) {
          // boxes around a few centres so that many overlap
          const cx = Math.floor(r() * 3) * 2 + r(), cy = Math.floor(r() * 3) * 2 + r(), w = 0.5 + r() * 2, h = 0.5 + r() * 2;
          if (center) boxes.push(cx, cy, w, h);
          else if (r() < 0.5) boxes.push(cy - h / 2, cx - w / 2, cy + h / 2, cx + w / 2);
          else boxes.push(cy + h / 2, cx + w / 2, cy - h / 2, cx - w / 2); // flipped corners
        }
        const ins: In[] = [
          { name: 'boxes', dims: [B, K, 4], data: boxes },
          { name: 'scores', dims: [B, classes, K], data: Array.from({ length: B * classes * K }, () => r()) },
          { name: 'max', dims: [1], data: [Math.floor(r() * (K + 1))], type: T.INT64, init: true },
          { name: 'iou', dims: [1], data: [0.1 + r() * 0.6], init: true },
        ];
        await vsOrt('NonMaxSuppression', 11, ins, { center_point_box: center }, [{ name: 'y', type: T.INT64 }]);
        await vsOrt('NonMaxSuppression', 10, [...ins, { name: 'st', dims: [1], data: [r() * 0.5], init: true }], { center_point_box: center }, [{ name: 'y', type: T.INT64 }]);
      }
      void f;
    }
  });
});
