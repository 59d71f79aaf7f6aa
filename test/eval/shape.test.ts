// Shape (with start/end at opset 15), Size, ConstantOfShape and Range against onnxruntime-node.
import { describe, it } from 'vitest';
import { tensor } from '../helpers/build.js';
import { SEEDS, T, count, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('shape-derived values (outside check: onnxruntime-node)', () => {
  it('Shape at opset 13 and with every start/end at opset 15, Size', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 0, 4);
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const out = [{ name: 'y', type: T.INT64 }];
      await vsOrt('Shape', 13, [x], {}, out);
      await vsOrt('Size', 13, [x], {}, out);
      const k = dims.length;
      for (const [start, end] of [[0, k], [1, -1], [-k - 2, k + 3], [-1, 1], [2, 1]]) await vsOrt('Shape', 15, [x], { start: start!, end: end! }, out);
    }
  });

  it('ConstantOfShape: default float zero, float and int64 values, an empty dim', async () => {
    for (const dims of [[2, 3], [4], [0, 2], []]) {
      const s = { name: 's', dims: [dims.length], data: dims, type: T.INT64 };
      await vsOrt('ConstantOfShape', 9, [s]);
      await vsOrt('ConstantOfShape', 9, [s], { value: tensor('v', [1], [2.5]) });
      await vsOrt('ConstantOfShape', 9, [s], { value: tensor('v', [1], [-7], T.INT64) }, [{ name: 'y', type: T.INT64 }]);
    }
  });

  it('Range for float and int64 start/limit/delta, positive and negative deltas, empty results', async () => {
    const cases: Array<[number, number, number, number]> = [
      [0, 10, 3, T.INT64], [10, 4, -2, T.INT64], [5, 5, 1, T.INT64], [1, 0, 1, T.INT64],
      [0.5, 3.2, 0.7, T.FLOAT], [3, -1.5, -0.5, T.FLOAT],
    ];
    for (const [a, b, c, type] of cases) {
      const sc = (name: string, v: number) => ({ name, dims: [], data: [v], type });
      await vsOrt('Range', 11, [sc('a', a), sc('b', b), sc('c', c)], {}, [{ name: 'y', type }]);
    }
  });
});
