// Softmax, LogSoftmax and Hardmax against onnxruntime-node: the coerce-to-2-D semantics of opset < 13 and the per-axis
// semantics of opset 13, every axis of seeded random shapes, and large logits.
import { describe, it } from 'vitest';
import { SEEDS, count, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Softmax / LogSoftmax (outside check: onnxruntime-node)', () => {
  for (const op of ['Softmax', 'LogSoftmax', 'Hardmax']) {
    for (const opset of [11, 13]) {
      it(`${op}@${opset} over every axis, default axis included`, async () => {
        for (const seed of SEEDS) {
          const r = rng(seed);
          const dims = randShape(r, 1, 4, 5);
          const x = { name: 'x', dims, data: randn(r, count(dims), seed === 1 ? 200 : 3) };
          await vsOrt(op, opset, [x]);
          for (let axis = -dims.length; axis < dims.length; axis++) await vsOrt(op, opset, [x], { axis });
        }
      });
    }
  }
});
