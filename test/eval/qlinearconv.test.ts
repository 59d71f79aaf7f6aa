// QLinearConv and ConvInteger. Outside check: onnxruntime-node (graph optimizations off) on seeded random
// shapes, groups, strides, pads and dilations, with per-channel weight scales; integer outputs must match exactly.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, rng, vsOrt, type In } from './ort-compare.js';

interface ConvCase { xDims: number[]; wDims: number[]; attrs: Record<string, number[] | number> }

/** A random 2-D convolution geometry (group divides both channel counts). */
function convCase(r: () => number): ConvCase {
  const group = r() < 0.3 ? 2 : 1;
  const C = group * (1 + Math.floor(r() * 3)), M = group * (1 + Math.floor(r() * 3));
  const kh = 1 + Math.floor(r() * 3), kw = 1 + Math.floor(r() * 3);
  const H = kh + 1 + Math.floor(r() * 5), W = kw + 1 + Math.floor(r() * 5);
  const s = [1 + Math.floor(r() * 2), 1 + Math.floor(r() * 2)];
  const p = randInt(r, 4, 0, 1);
  const d = r() < 0.3 ? [2, 1] : [1, 1];
  const xDims = [1 + Math.floor(r() * 2), C, H + 2 * (d[0]! - 1) * kh, W];
  return { xDims, wDims: [M, C / group, kh, kw], attrs: { group, strides: s, pads: p, dilations: d } };
}

describe('QLinearConv (outside check: onnxruntime-node, exact integers)', () => {
  it('uint8 input, int8 weights with per-channel scales, int32 bias', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const { xDims, wDims, attrs } = convCase(r);
      const M = wDims[0]!;
      const ins: In[] = [
        { name: 'x', dims: xDims, data: randInt(r, count(xDims), 0, 255), type: T.UINT8 },
        { name: 'xs', dims: [], data: [0.02 + r() * 0.05], init: true },
        { name: 'xz', dims: [], data: [Math.floor(r() * 255)], type: T.UINT8, init: true },
        { name: 'w', dims: wDims, data: randInt(r, count(wDims), -127, 127), type: T.INT8, init: true },
        { name: 'ws', dims: [M], data: Array.from({ length: M }, () => 0.001 + r() * 0.01), init: true },
        // onnxruntime requires symmetric (zero) int8 weight zero points
        { name: 'wz', dims: [M], data: new Array(M).fill(0), type: T.INT8, init: true },
        { name: 'ys', dims: [], data: [0.05 + r() * 0.1], init: true },
        { name: 'yz', dims: [], data: [Math.floor(r() * 255)], type: T.UINT8, init: true },
        { name: 'b', dims: [M], data: randInt(r, M, -5000, 5000), type: T.INT32, init: true },
      ];
      await vsOrt('QLinearConv', 10, ins, attrs, [{ name: 'y', type: T.UINT8 }]);
    }
  });

  it('uint8 weights with a per-tensor zero point, int8 output, no bias', async () => {
    for (const seed of SEEDS) {
      const r = rng(100 + seed);
      const { xDims, wDims, attrs } = convCase(r);
      const M = wDims[0]!;
      const ins: In[] = [
        { name: 'x', dims: xDims, data: randInt(r, count(xDims), -128, 127), type: T.INT8 },
        { name: 'xs', dims: [], data: [0.02 + r() * 0.05], init: true },
        { name: 'xz', dims: [], data: [Math.floor(r() * 40) - 20], type: T.INT8, init: true },
        { name: 'w', dims: wDims, data: randInt(r, count(wDims), -127, 127), type: T.INT8, init: true },
        { name: 'ws', dims: [M], data: Array.from({ length: M }, () => 0.001 + r() * 0.01), init: true },
        { name: 'wz', dims: [M], data: new Array(M).fill(0), type: T.INT8, init: true },
        { name: 'ys', dims: [], data: [0.02 + r() * 0.05], init: true },
        { name: 'yz', dims: [], data: [Math.floor(r() * 40) - 20], type: T.INT8, init: true },
      ];
      await vsOrt('QLinearConv', 10, ins, attrs, [{ name: 'y', type: T.INT8 }]);
    }
  });
});

describe('ConvInteger (outside check: onnxruntime-node, exact int32)', () => {
  it('uint8 input and weights with zero points', async () => {
    for (const seed of SEEDS) {
      const r = rng(200 + seed);
      const { xDims, wDims, attrs } = convCase(r);
      const ins: In[] = [
        { name: 'x', dims: xDims, data: randInt(r, count(xDims), 0, 255), type: T.UINT8 },
        { name: 'w', dims: wDims, data: randInt(r, count(wDims), 0, 255), type: T.UINT8, init: true },
        { name: 'xz', dims: [], data: [Math.floor(r() * 255)], type: T.UINT8, init: true },
        { name: 'wz', dims: [], data: [Math.floor(r() * 255)], type: T.UINT8, init: true },
      ];
      await vsOrt('ConvInteger', 10, ins, attrs, [{ name: 'y', type: T.INT32 }]);
    }
  });
});
