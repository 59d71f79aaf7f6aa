// Gather against onnxruntime-node: every axis, scalar and 2-D index tensors, negative indices.
import { describe, expect, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';
import { Gather } from '../../src/eval/kernels/gather.js';
import type { Node } from '../../src/graph/ir.js';

describe('Gather (outside check: onnxruntime-node)', () => {
  it('every axis with random indices of rank 0-2', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      for (let axis = 0; axis < dims.length; axis++) {
        const id = randShape(r, 0, 2, 3);
        const idx = randInt(r, count(id), -dims[axis]!, dims[axis]! - 1);
        await vsOrt('Gather', 13, [x, { name: 'i', dims: id, data: idx, type: T.INT64 }], { axis: r() < 0.5 ? axis : axis - dims.length });
      }
    }
  });

  it('rejects an out-of-range index with a one-line error naming the node', () => {
    const node: Node = { name: 'g1', opType: 'Gather', domain: '', inputs: [], outputs: ['y'], attributes: [], docString: '', extra: [] };
    const ctx = { node, opset: 13, precision: 'float64' as const, runSubgraph: () => [] };
    expect(() => Gather.run([{ type: T.FLOAT, dims: [3], data: new Float64Array(3) }, { type: T.INT64, dims: [], data: Float64Array.of(3) }], ctx))
      .toThrow(/g1.*index 3 is out of range/);
  });
});
