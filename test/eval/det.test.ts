// Det. Outside checks: onnxruntime-node (graph optimizations off) on seeded random batches of matrices (1x1 to
// 5x5, singular ones included); det of a permutation matrix is its sign (a property needing no reference).
import { describe, expect, it } from 'vitest';
import { SEEDS, count, randn, rng, vsOrt } from './ort-compare.js';
import { Det } from '../../src/eval/kernels/det.js';
import type { Node } from '../../src/graph/ir.js';

describe('Det (outside check: onnxruntime-node)', () => {
  it('batched random matrices, with singular ones', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const n = 1 + Math.floor(r() * 5);
      const batch = r() < 0.5 ? [] : [1 + Math.floor(r() * 3)];
      const dims = [...batch, n, n];
      const data = randn(r, count(dims));
      if (n > 1 && r() < 0.5) for (let j = 0; j < n; j++) data[n + j] = 2 * data[j]!; // second row = 2 x first row
      await vsOrt('Det', 11, [{ name: 'x', dims, data }], {}, undefined, 1e-4);
    }
  });

  it('a permutation matrix has determinant equal to its sign', () => {
    const node: Node = { name: 'd1', opType: 'Det', domain: '', inputs: [], outputs: ['y'], attributes: [], docString: '', extra: [] };
    const ctx = { node, opset: 11, precision: 'float64' as const, runSubgraph: () => [] };
    // the cycle (0 1 2) is even; swapping rows 0 and 1 is odd
    const [even] = Det.run([{ type: 1, dims: [3, 3], data: Float64Array.of(0, 1, 0, 0, 0, 1, 1, 0, 0) }], ctx);
    const [odd] = Det.run([{ type: 1, dims: [3, 3], data: Float64Array.of(0, 1, 0, 1, 0, 0, 0, 0, 1) }], ctx);
    expect([even!.data[0], odd!.data[0]]).toEqual([1, -1]);
  });
});
