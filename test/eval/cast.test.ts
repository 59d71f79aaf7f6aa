// Cast and CastLike against onnxruntime-node: float to every integer type (truncation toward zero), to bool, to
// double, and through float16/bfloat16 (round to nearest even) and back.
import { describe, expect, it } from 'vitest';
import { Cast } from '../../src/eval/kernels/cast.js';
import type { Node } from '../../src/graph/ir.js';
import { GraphBuilder } from '../helpers/build.js';
import { runBoth } from './harness.js';
import { SEEDS, T, count, randInt, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Cast (outside check: onnxruntime-node)', () => {
  it('float32 to int64/int32/int16/int8 truncates toward zero; to uint8 and bool; to double', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const x = { name: 'x', dims, data: randn(r, count(dims), 40).map((v, i) => (i % 5 === 0 ? 0 : v)) };
      for (const to of [T.INT64, T.INT32, T.INT16, T.INT8, T.BOOL, T.DOUBLE]) await vsOrt('Cast', 13, [x], { to }, [{ name: 'y', type: to }]);
      await vsOrt('Cast', 13, [{ ...x, data: x.data.map(Math.abs) }], { to: T.UINT8 }, [{ name: 'y', type: T.UINT8 }]);
      const xi = { name: 'x', dims, data: randInt(r, count(dims), -300, 300), type: T.INT64 };
      for (const to of [T.FLOAT, T.INT32, T.INT8, T.BOOL]) await vsOrt('Cast', 13, [xi], { to }, [{ name: 'y', type: to }]);
      await vsOrt('CastLike', 15, [x, { name: 'like', dims: [1], data: [0], type: T.INT32, init: true }], {}, [{ name: 'y', type: T.INT32 }]);
    }
  });

  it('float32 -> float16/bfloat16 -> float32 rounds to nearest even like onnxruntime', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3, 8);
      const data = randn(r, count(dims), 1000);
      for (const narrow of [T.FLOAT16, T.BFLOAT16]) {
        const g = new GraphBuilder();
        g.input('x', dims).output('y', undefined, T.FLOAT);
        const h = g.node('Cast', ['x'], { to: narrow });
        g.node('Cast', [h], { to: T.FLOAT }, { outputs: ['y'] });
        const res = await runBoth(g, [{ name: 'x', dims, data }], 13);
        expect(Array.from(res.f64.get('y')!.data)).toEqual(Array.from(res.ort.y!.data));
        expect(Array.from(res.f32.get('y')!.data)).toEqual(Array.from(res.ort.y!.data));
      }
    }
  });

  it('a cast to STRING stops with a one-line unsupported-op error naming node and opset', () => {
    const node: Node = {
      name: 'c9', opType: 'Cast', domain: '', inputs: ['x'], outputs: ['y'], docString: '', extra: [],
      attributes: [{ name: 'to', value: { type: 'INT', i: T.STRING }, docString: '', refAttrName: '', extra: [] }],
    };
    const x = { type: T.FLOAT, dims: [1], data: Float64Array.of(1) };
    expect(() => Cast.run([x], { node, opset: 13, precision: 'float64', runSubgraph: () => [] }))
      .toThrow(/^node 'c9': ai.onnx.Cast at opset 13: a cast from float32 to string is not supported by pleat's evaluator$/);
  });
});
