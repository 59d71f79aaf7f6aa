// Reductions and ArgMax/ArgMin against onnxruntime-node on seeded random shapes: attribute axes (opset 13 for
// all but ReduceSum, 11 for ReduceSum), input axes (ReduceSum at 13), keepdims, default axes, negative axes,
// noop_with_empty_axes, and select_last_index with ties.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

const OPS = ['ReduceMean', 'ReduceSum', 'ReduceMax', 'ReduceMin', 'ReduceL2', 'ReduceL1', 'ReduceSumSquare', 'ReduceProd', 'ReduceLogSumExp'];

function randomAxes(r: () => number, rank: number): number[] {
  const axes = Array.from({ length: rank }, (_, i) => i).filter(() => r() < 0.5).map((a) => (r() < 0.5 ? a - rank : a));
  return axes.length ? axes : [rank - 1];
}

describe('reductions (outside check: onnxruntime-node)', () => {
  for (const op of OPS) {
    it(`${op}: random axes, keepdims 0/1, default axes`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const dims = randShape(r, 1, 4);
        const x = { name: 'x', dims, data: randn(r, count(dims)) };
        const axes = randomAxes(r, dims.length);
        const opset = op === 'ReduceSum' ? 11 : 13;
        await vsOrt(op, opset, [x], { axes, keepdims: seed % 2 });
        await vsOrt(op, opset, [x], { keepdims: seed % 2 });
      }
    });
  }

  it('opset 18 input-form axes for every reduction, with noop_with_empty_axes', async () => {
    for (const seed of SEEDS.slice(0, 3)) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const axes = randomAxes(r, dims.length);
      for (const op of OPS) {
        await vsOrt(op, 18, [x, { name: 'a', dims: [axes.length], data: axes, type: T.INT64, init: true }], { keepdims: seed % 2 });
        await vsOrt(op, 18, [x]);
      }
      await vsOrt('ReduceMax', 18, [x, { name: 'a', dims: [0], data: [], type: T.INT64, init: true }], { noop_with_empty_axes: 1 });
    }
  });

  it('ReduceLogSum on positive data', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      await vsOrt('ReduceLogSum', 13, [{ name: 'x', dims, data: randn(r, count(dims)).map((v) => 0.1 + Math.abs(v)) }], { axes: randomAxes(r, dims.length), keepdims: seed % 2 });
    }
  });

  it('ReduceSum input axes at opset 13, noop_with_empty_axes, and int64 data', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const axes = randomAxes(r, dims.length);
      await vsOrt('ReduceSum', 13, [x, { name: 'a', dims: [axes.length], data: axes, type: T.INT64, init: true }], { keepdims: seed % 2 });
      await vsOrt('ReduceSum', 13, [x]);
      await vsOrt('ReduceSum', 13, [x, { name: 'a', dims: [0], data: [], type: T.INT64, init: true }], { noop_with_empty_axes: 1 });
      const xi = { name: 'x', dims, data: randInt(r, count(dims), -9, 9), type: T.INT64 };
      await vsOrt('ReduceSum', 13, [xi, { name: 'a', dims: [axes.length], data: axes, type: T.INT64, init: true }], {}, [{ name: 'y', type: T.INT64 }]);
    }
  });

  for (const op of ['ArgMax', 'ArgMin']) {
    it(`${op}: every axis, keepdims, select_last_index with ties`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const dims = randShape(r, 1, 4);
        const x = { name: 'x', dims, data: Float32Array.from(randInt(r, count(dims), 0, 3)) }; // small ints: many ties
        for (let axis = -dims.length; axis < dims.length; axis++) {
          for (const last of [0, 1]) {
            await vsOrt(op, 13, [x], { axis, keepdims: seed % 2, select_last_index: last }, [{ name: 'y', type: T.INT64 }]);
          }
        }
        await vsOrt(op, 11, [x], {}, [{ name: 'y', type: T.INT64 }]);
      }
    });
  }
});
