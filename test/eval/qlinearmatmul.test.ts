// QLinearMatMul and MatMulInteger. Outside check: onnxruntime-node (graph optimizations off) on seeded random
// shapes (batched, 2-D) and zero points; integer outputs must match exactly.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, rng, vsOrt, type In } from './ort-compare.js';

function shapes(r: () => number): [number[], number[]] {
  const M = 1 + Math.floor(r() * 5), K = 1 + Math.floor(r() * 6), N = 1 + Math.floor(r() * 5);
  const batch = r() < 0.5 ? [1 + Math.floor(r() * 3)] : [];
  return [[...batch, M, K], r() < 0.5 ? [...batch, K, N] : [K, N]];
}

describe('QLinearMatMul (outside check: onnxruntime-node, exact integers)', () => {
  it('uint8 and int8 operands, per-tensor scales and zero points', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const [ad, bd] = shapes(r);
      const signed = seed % 2 === 0;
      const type = signed ? T.INT8 : T.UINT8;
      const [lo, hi] = signed ? [-128, 127] : [0, 255];
      const ins: In[] = [
        { name: 'a', dims: ad, data: randInt(r, count(ad), lo, hi), type },
        { name: 'as', dims: [], data: [0.01 + r() * 0.05], init: true },
        { name: 'az', dims: [], data: randInt(r, 1, lo, hi), type, init: true },
        { name: 'b', dims: bd, data: randInt(r, count(bd), lo, hi), type, init: true },
        { name: 'bs', dims: [], data: [0.01 + r() * 0.05], init: true },
        { name: 'bz', dims: [], data: randInt(r, 1, lo, hi), type, init: true },
        { name: 'ys', dims: [], data: [0.05 + r() * 0.5], init: true },
        { name: 'yz', dims: [], data: randInt(r, 1, lo, hi), type, init: true },
      ];
      await vsOrt('QLinearMatMul', 10, ins, {}, [{ name: 'y', type }]);
    }
  });
});

describe('QLinearMatMul with per-column scales and zero points of b (outside check: onnxruntime-node)', () => {
  it('uint8, 2-D', async () => {
    for (const seed of SEEDS) {
      const r = rng(30 + seed);
      const M = 1 + Math.floor(r() * 4), K = 1 + Math.floor(r() * 6), N = 1 + Math.floor(r() * 5);
      const ins: In[] = [
        { name: 'a', dims: [M, K], data: randInt(r, M * K, 0, 255), type: T.UINT8 },
        { name: 'as', dims: [], data: [0.01 + r() * 0.05], init: true },
        { name: 'az', dims: [], data: randInt(r, 1, 0, 255), type: T.UINT8, init: true },
        { name: 'b', dims: [K, N], data: randInt(r, K * N, 0, 255), type: T.UINT8, init: true },
        { name: 'bs', dims: [N], data: Array.from({ length: N }, () => 0.01 + r() * 0.05), init: true },
        { name: 'bz', dims: [N], data: randInt(r, N, 0, 255), type: T.UINT8, init: true },
        { name: 'ys', dims: [], data: [0.05 + r() * 0.5], init: true },
        { name: 'yz', dims: [], data: randInt(r, 1, 0, 255), type: T.UINT8, init: true },
      ];
      await vsOrt('QLinearMatMul', 10, ins, {}, [{ name: 'y', type: T.UINT8 }]);
    }
  });
});

describe('MatMulInteger (outside check: onnxruntime-node, exact int32)', () => {
  it('per-column zero points of b', async () => {
    for (const seed of SEEDS) {
      const r = rng(70 + seed);
      const M = 1 + Math.floor(r() * 4), K = 1 + Math.floor(r() * 6), N = 1 + Math.floor(r() * 5);
      const ins: In[] = [
        { name: 'a', dims: [M, K], data: randInt(r, M * K, 0, 255), type: T.UINT8 },
        { name: 'b', dims: [K, N], data: randInt(r, K * N, 0, 255), type: T.UINT8, init: true },
        { name: 'az', dims: [], data: randInt(r, 1, 0, 255), type: T.UINT8, init: true },
        { name: 'bz', dims: [N], data: randInt(r, N, 0, 255), type: T.UINT8, init: true },
      ];
      await vsOrt('MatMulInteger', 10, ins, {}, [{ name: 'y', type: T.INT32 }]);
    }
  });

  it('uint8 x uint8/int8 with zero points', async () => {
    for (const seed of SEEDS) {
      const r = rng(50 + seed);
      const [ad, bd] = shapes(r);
      const bt = seed % 2 === 0 ? T.INT8 : T.UINT8;
      const ins: In[] = [
        { name: 'a', dims: ad, data: randInt(r, count(ad), 0, 255), type: T.UINT8 },
        { name: 'b', dims: bd, data: randInt(r, count(bd), bt === T.INT8 ? -128 : 0, bt === T.INT8 ? 127 : 255), type: bt, init: true },
        { name: 'az', dims: [], data: randInt(r, 1, 0, 255), type: T.UINT8, init: true },
        { name: 'bz', dims: [], data: bt === T.INT8 ? [0] : randInt(r, 1, 0, 255), type: bt, init: true },
      ];
      await vsOrt('MatMulInteger', 10, ins, {}, [{ name: 'y', type: T.INT32 }]);
    }
  });
});
