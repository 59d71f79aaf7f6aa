// CumSum against onnxruntime-node (graph optimizations off) on seeded random shapes, axes (negative too),
// exclusive and reverse, for float, double, int32 and int64, at opsets 11 and 14. Semantics: ONNX operator
// docs (CumSum); the fixed cases test_cumsum_* of the ONNX backend data (onnx 1.12.0) run in
// conformance.test.ts.
import { describe, it } from 'vitest';
import { count, randInt, randShape, randn, rng, SEEDS, T, vsOrt } from './ort-compare.js';

describe('CumSum vs onnxruntime-node', () => {
  for (const type of [T.FLOAT, T.DOUBLE, T.INT32, T.INT64]) {
    it(`type ${type}: random axes, exclusive and reverse (seeded)`, async () => {
      for (const seed of [...SEEDS, 7, 8]) {
        const r = rng(seed * 31 + type);
        const dims = randShape(r, 1, 4, 4);
        const n = count(dims);
        const data = type === T.FLOAT || type === T.DOUBLE ? randn(r, n) : randInt(r, n, -50, 50);
        const axis = Math.floor(r() * dims.length) - (r() < 0.5 ? dims.length : 0);
        const attrs = { exclusive: seed % 2, reverse: (seed >> 1) % 2 };
        const axisType = seed % 3 === 0 ? T.INT32 : T.INT64;
        await vsOrt('CumSum', seed % 2 ? 11 : 14, [
          { name: 'x', dims, data, type },
          { name: 'axis', dims: [], data: [axis], type: axisType, init: seed % 2 === 0 },
        ], attrs, [{ name: 'y', type }], 1e-5);
      }
    });
  }
});
