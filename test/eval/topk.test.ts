// TopK. Outside checks: onnxruntime-node (graph optimizations off) on seeded random shapes whose values are
// drawn from a few integers, so ties are everywhere; the ONNX TopK docs' tie rule (the lower index first).
import { describe, expect, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, rng, vsOrt } from './ort-compare.js';
import { TopK10 } from '../../src/eval/kernels/topk.js';
import type { Node } from '../../src/graph/ir.js';

const outs = [{ name: 'v' }, { name: 'i', type: T.INT64 }];

describe('TopK (outside check: onnxruntime-node)', () => {
  it('ties, largest and smallest, every axis (opset 11)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3, 6);
      const x = { name: 'x', dims, data: randInt(r, count(dims), -2, 2) };
      for (let axis = 0; axis < dims.length; axis++) {
        const k = Math.floor(r() * (dims[axis]! + 1));
        const largest = r() < 0.5 ? 1 : 0;
        await vsOrt('TopK', 11, [x, { name: 'k', dims: [1], data: [k], type: T.INT64, init: true }], { axis: r() < 0.5 ? axis : axis - dims.length, largest, sorted: 1 }, outs);
      }
    }
  });

  it('opset 1 (k attribute) and opset 10 (k input), default axis', async () => {
    for (const seed of SEEDS.slice(0, 3)) {
      const r = rng(10 + seed);
      const dims = randShape(r, 1, 3, 5);
      const x = { name: 'x', dims, data: randInt(r, count(dims), 0, 3) };
      const k = 1 + Math.floor(r() * dims[dims.length - 1]!);
      await vsOrt('TopK', 1, [x], { k }, outs);
      await vsOrt('TopK', 10, [x, { name: 'k', dims: [1], data: [k], type: T.INT64, init: true }], {}, outs);
    }
  });

  it('the lower index comes first among equal values (ONNX TopK docs)', () => {
    const node: Node = { name: 't1', opType: 'TopK', domain: '', inputs: [], outputs: ['v', 'i'], attributes: [], docString: '', extra: [] };
    const ctx = { node, opset: 11, precision: 'float64' as const, runSubgraph: () => [] };
    const [v, i] = TopK10.run([{ type: T.FLOAT, dims: [6], data: Float64Array.of(1, 3, 3, 0, 3, 1) }, { type: T.INT64, dims: [1], data: Float64Array.of(4) }], ctx);
    expect(Array.from(v!.data)).toEqual([3, 3, 3, 1]);
    expect(Array.from(i!.data)).toEqual([1, 2, 4, 0]);
    node.attributes.push({ name: 'largest', value: { type: 'INT', i: 0 }, docString: '', refAttrName: '', extra: [] });
    const [, j] = TopK10.run([{ type: T.FLOAT, dims: [6], data: Float64Array.of(1, 3, 3, 0, 3, 1) }, { type: T.INT64, dims: [1], data: Float64Array.of(3) }], ctx);
    expect(Array.from(j!.data)).toEqual([3, 0, 5]);
  });
});
