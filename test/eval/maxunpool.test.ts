// MaxUnpool. Outside checks: onnxruntime-node (graph optimizations off) on MaxPool -> MaxUnpool models with
// seeded random shapes, kernels, strides and pads (the indices come from MaxPool, as in a real model); the ONNX
// backend case test_maxunpool_export_with_output_shape for the output_shape input (run by conformance.test.ts;
// onnxruntime 1.30 places values differently there, see the kernel's comment).
import { describe, it } from 'vitest';
import { GraphBuilder } from '../helpers/build.js';
import { SEEDS, T, count, randn, rng, vsOrtGraph } from './ort-compare.js';

describe('MaxUnpool (outside check: onnxruntime-node)', () => {
  it('unpools what MaxPool picked, 1-D and 2-D', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const sp = 1 + Math.floor(r() * 2);
      const kernel = Array.from({ length: sp }, () => 1 + Math.floor(r() * 3));
      const strides = kernel.map((k) => Math.max(1, k - Math.floor(r() * 2)));
      const pads = [...kernel.map((k) => (k > 1 && r() < 0.3 ? 1 : 0)), ...kernel.map(() => 0)];
      const dims = [1 + Math.floor(r() * 2), 1 + Math.floor(r() * 3), ...kernel.map((k) => k + Math.floor(r() * 5))];
      const g = new GraphBuilder();
      g.input('x', dims);
      const attrs = { kernel_shape: kernel, strides, pads };
      g.node('MaxPool', ['x'], attrs, { outputs: ['p', 'i'] });
      g.node('MaxUnpool', ['p', 'i'], attrs, { outputs: ['y'] });
      g.output('y');
      await vsOrtGraph(g, [{ name: 'x', dims, data: randn(r, count(dims)) }], 11, [{ name: 'y' }], undefined, `MaxUnpool seed ${seed} ${JSON.stringify(attrs)} [${dims}]`);
    }
  });

  it('unpools indices given as an int64 input', async () => {
    const g = new GraphBuilder();
    g.input('p', [1, 1, 2, 2]);
    g.input('i', [1, 1, 2, 2], T.INT64);
    g.node('MaxUnpool', ['p', 'i'], { kernel_shape: [2, 2], strides: [2, 2] }, { outputs: ['y'] });
    g.output('y');
    await vsOrtGraph(g, [{ name: 'p', dims: [1, 1, 2, 2], data: [1, 2, 3, 4] }, { name: 'i', dims: [1, 1, 2, 2], data: [0, 3, 9, 14], type: T.INT64 }], 11, [{ name: 'y' }]);
  });
});
