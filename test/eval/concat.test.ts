// Concat and Split against onnxruntime-node: every axis of seeded random shapes; Split's attribute form (<13),
// input form (>=13) and equal split by output count.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randShape, randn, rng, vsOrt } from './ort-compare.js';

describe('Concat / Split (outside check: onnxruntime-node)', () => {
  it('Concat of 1-3 inputs along every axis (negative axes at 13)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 4);
      for (let axis = -dims.length; axis < dims.length; axis++) {
        const a = (axis + dims.length) % dims.length;
        const ins = Array.from({ length: 1 + (seed % 3) }, (_, k) => {
          const d = [...dims];
          d[a] = 1 + Math.floor(r() * 3);
          return { name: `x${k}`, dims: d, data: randn(r, count(d)) };
        });
        await vsOrt('Concat', axis < 0 ? 13 : 7, ins, { axis: axis < 0 ? axis : a });
      }
    }
  });

  it('Split: sizes as attribute (opset 11), as input (opset 13), and equal parts', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3);
      const axis = Math.floor(r() * dims.length);
      dims[axis] = 6;
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      const outs = [{ name: 'a' }, { name: 'b' }, { name: 'c' }];
      await vsOrt('Split', 11, [x], { axis, split: [1, 2, 3] }, outs);
      await vsOrt('Split', 13, [x, { name: 's', dims: [3], data: [3, 0, 3], type: T.INT64, init: true }], { axis: axis - dims.length }, outs);
      await vsOrt('Split', 13, [x], { axis }, outs);
      await vsOrt('Split', 7, [x], { axis }, outs.slice(0, 2));
      const d7 = [...dims];
      d7[axis] = 7; // opset 18: num_outputs may split unevenly, the last part smaller
      await vsOrt('Split', 18, [{ name: 'x', dims: d7, data: randn(r, count(d7)) }], { axis, num_outputs: 3 }, outs);
    }
  });
});
