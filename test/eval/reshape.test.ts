// Flatten, Reshape, Squeeze, Unsqueeze against onnxruntime-node on seeded random shapes, in every opset form
// (Reshape 0/-1 and allowzero at 14; Squeeze/Unsqueeze axes as attribute before 13 and as input from 13).
import { describe, expect, it } from 'vitest';
import { SEEDS, T, count, randShape, randn, rng, vsOrt } from './ort-compare.js';
import { Reshape } from '../../src/eval/kernels/reshape.js';
import type { Node } from '../../src/graph/ir.js';

describe('reshape family (outside check: onnxruntime-node)', () => {
  it('Flatten at every axis, negative axes at opset 13', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      await vsOrt('Flatten', 9, [x]);
      for (let axis = 0; axis <= dims.length; axis++) await vsOrt('Flatten', 9, [x], { axis });
      for (let axis = -dims.length; axis < 0; axis++) await vsOrt('Flatten', 13, [x], { axis });
    }
  });

  it('Reshape with 0 (copy a dim) and -1 (infer), and allowzero at opset 14', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 2, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const shape = [0, -1];
      await vsOrt('Reshape', 13, [x, { name: 's', dims: [2], data: shape, type: T.INT64, init: true }]);
      await vsOrt('Reshape', 5, [x, { name: 's', dims: [1], data: [-1], type: T.INT64, init: true }]);
      const rev = [...dims].reverse();
      await vsOrt('Reshape', 14, [x, { name: 's', dims: [rev.length], data: rev, type: T.INT64, init: true }], { allowzero: 1 });
    }
    // allowzero=1 keeps a literal 0: an empty tensor reshaped to [0, 3] (ONNX Reshape-14 docs)
    const empty = { name: 'x', dims: [0, 3], data: [] };
    await vsOrt('Reshape', 14, [empty, { name: 's', dims: [2], data: [3, 0], type: T.INT64, init: true }], { allowzero: 1 });
  });

  it('Squeeze and Unsqueeze: attribute axes (opset 11) and input axes (opset 13), negative and unsorted', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4).map((d) => (r() < 0.4 ? 1 : d));
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const ones = dims.flatMap((d, i) => (d === 1 ? [i] : []));
      await vsOrt('Squeeze', 11, [x]);
      await vsOrt('Squeeze', 13, [x]);
      if (ones.length) {
        const neg = ones.map((a) => a - dims.length);
        await vsOrt('Squeeze', 11, [x], { axes: neg });
        await vsOrt('Squeeze', 13, [x, { name: 'a', dims: [ones.length], data: ones, type: T.INT64, init: true }]);
      }
      const ax = [dims.length + 1, 0, -1];
      await vsOrt('Unsqueeze', 11, [x], { axes: ax });
      await vsOrt('Unsqueeze', 13, [x, { name: 'a', dims: [3], data: ax, type: T.INT64, init: true }]);
    }
  });

  it('rejects a reshape that does not fit, naming the node', () => {
    const node: Node = { name: 'r1', opType: 'Reshape', domain: '', inputs: [], outputs: ['y'], attributes: [], docString: '', extra: [] };
    const ctx = { node, opset: 13, precision: 'float64' as const, runSubgraph: () => [] };
    const x = { type: T.FLOAT, dims: [2, 3], data: new Float64Array(6) };
    expect(() => Reshape.run([x, { type: T.INT64, dims: [1], data: Float64Array.of(4) }], ctx)).toThrow(/r1.*cannot reshape \[2,3\] to \[4\]/);
  });
});
