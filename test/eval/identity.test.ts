// Identity and inference-mode Dropout against onnxruntime-node, including Dropout's mask output (opset 7, 12)
// and the error for training_mode=true.
import { describe, expect, it } from 'vitest';
import { f } from '../helpers/build.js';
import { SEEDS, T, count, randShape, randn, rng, vsOrt } from './ort-compare.js';
import { Dropout } from '../../src/eval/kernels/identity.js';
import type { Node } from '../../src/graph/ir.js';

describe('Identity / Dropout (outside check: onnxruntime-node)', () => {
  it('pass the input through; the Dropout mask is all true', async () => {
    for (const seed of SEEDS.slice(0, 3)) {
      const r = rng(seed);
      const dims = randShape(r);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      await vsOrt('Identity', 16, [x]);
      await vsOrt('Dropout', 7, [x], { ratio: f(0.3) });
      await vsOrt('Dropout', 13, [x, { name: 'r', dims: [], data: [0.4], init: true }], {}, [{ name: 'y' }, { name: 'm', type: T.BOOL }]);
    }
  });

  it('the opset 10 mask is all true too (onnxruntime writes false for opsets 7-11; ONNX Dropout-12 reference gives ones)', async () => {
    const x = { name: 'x', dims: [2, 3], data: randn(rng(3), 6) };
    const res = await vsOrt('Dropout', 10, [x], {}, [{ name: 'y' }]);
    expect(res.f64.get('y')!.data).toEqual(Float64Array.from(x.data));
    const [, mask] = Dropout.run([res.f64.get('y')!], { node: { name: 'd0', opType: 'Dropout', domain: '', inputs: [], outputs: ['y', 'm'], attributes: [], docString: '', extra: [] }, opset: 10, precision: 'float64', runSubgraph: () => [] });
    expect(mask!.type).toBe(T.BOOL);
    expect(Array.from(mask!.data)).toEqual([1, 1, 1, 1, 1, 1]);
  });

  it('training_mode=true stops with an unsupported-op error', () => {
    const node: Node = { name: 'd1', opType: 'Dropout', domain: '', inputs: [], outputs: ['y'], attributes: [], docString: '', extra: [] };
    const x = { type: T.FLOAT, dims: [2], data: new Float64Array(2) };
    const on = { type: T.BOOL, dims: [], data: Float64Array.of(1) };
    expect(() => Dropout.run([x, undefined, on], { node, opset: 13, precision: 'float64', runSubgraph: () => [] })).toThrow(/d1.*training_mode=true/);
  });
});
