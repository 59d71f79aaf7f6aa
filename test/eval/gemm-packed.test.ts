// The SIMD matrix product keeps the last constant A it packed in the kernel memory, so the next product with the
// same weight (the next probe of a lockstep side) skips packing. It must never reuse a packing that something
// else has overwritten: another weight, a non-constant operand, a depthwise convolution laid out in the same
// memory. The reference is the same product on a fresh copy of A, which is never constant and so always packed.
import { afterAll, describe, expect, it } from 'vitest';
import { gemm, gemmScalar, gemmSmall, rowMajor, simdOn } from '../../src/eval/gemm.js';
import { markConstant } from '../../src/eval/pool.js';
import { runModel } from '../../src/eval/run.js';
import { parseModel } from '../../src/onnx/read.js';
import { setThreads, stopThreads } from '../../src/eval/threads.js';
import { availableParallelism } from 'node:os';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';

afterAll(async () => { setThreads(Math.max(1, availableParallelism())); await stopThreads(); });

function product(M: number, N: number, K: number, A: Float64Array | Float32Array, B: Float64Array): string {
  const C = new Float64Array(M * N);
  gemm(M, N, K, rowMajor(A, 0, K), rowMajor(B, 0, N), C, 0, N, false);
  return Buffer.from(C.buffer).toString('base64');
}

describe('packed weights reused across products', () => {
  it('a seeded sequence of products over two constant weights, a plain operand and a depthwise conv gives the bits of a fresh packing', () => {
    expect(simdOn()).toBe(true);
    for (const threads of [1, 2]) {
      setThreads(threads);
      const r = rng(31 + threads);
      const M = 64, K = 300;
      const w1 = Float64Array.from(randn(r, M * K, 1)), w2 = Float64Array.from(randn(r, M * K, 1));
      // float32 weights in float64 products are copied in as stored and widened by the first product that uses them
      const w3 = Float32Array.from(randn(r, M * K, 1)), w4 = Float32Array.from(randn(r, M * K, 1));
      markConstant(w1); markConstant(w2); markConstant(w3); markConstant(w4);
      const plain = Float64Array.from(randn(r, M * K, 1)), plain32 = Float32Array.from(randn(r, M * K, 1));
      // a depthwise conv runs in the same kernel memory between products
      const g = new GraphBuilder();
      g.input('x', [1, 8, 9, 9]).output('y');
      g.node('Conv', ['x', g.init('dw', [8, 1, 3, 3], randn(r, 72, 0.3))], { group: 8, pads: [1, 1, 1, 1] }, { outputs: ['y'] });
      const dw = parseModel(modelBytes(g), '.');
      const x = Float64Array.from(randn(r, 8 * 81, 1));
      for (let step = 0; step < 24; step++) {
        const A = [w1, w1, w2, plain, w3, w3, w4, plain32][step % 4 === 2 ? (step % 8 === 2 ? 0 : 4) : Math.floor(r() * 8)]!; // right after the depthwise conv: w1 or w3
        const N = 1 + Math.floor(r() * 90) + (step % 3 === 0 ? 600 : 0); // some span two column panels
        const B = Float64Array.from(randn(r, K * N, 1));
        // first with whatever the step before left in the kernel memory, then against a fresh packing
        const got = product(M, N, K, A, B), again = product(M, N, K, A, B);
        const fresh = product(M, N, K, Float64Array.from(A), B);
        expect(got, `step ${step}`).toBe(fresh);
        expect(again, `step ${step}, again`).toBe(fresh);
        if (step % 4 === 1) { product(M, 5, K, w1, Float64Array.from(randn(r, K * 5, 1))); runModel(dw, new Map([['x', { type: 1, dims: [1, 8, 9, 9], data: x }]]), { precision: 'float64' }); }
      }
    }
  });
});

describe('small products without packing', () => {
  it('gemmSmall gives the bits of the blocked scalar product on seeded small shapes (k past one block, strides, accumulate, float32)', () => {
    const r = rng(77);
    for (let trial = 0; trial < 200; trial++) {
      const K = trial % 10 === 0 ? 257 + Math.floor(r() * 250) : 1 + Math.floor(r() * 40);
      const M = K > 256 ? 1 : 1 + Math.floor(r() * 6), N = K > 256 ? 1 : 1 + Math.floor(r() * 6);
      const transA = trial % 3 === 0, transB = trial % 4 === 1, acc = trial % 5 === 2, f32 = trial % 2 === 0;
      const A = Float64Array.from(randn(r, M * K, 1)), B = Float64Array.from(randn(r, K * N, 1));
      const start = randn(r, M * N, 1);
      const out = (f: typeof gemmSmall) => {
        const C = f32 ? Float32Array.from(start) : Float64Array.from(start);
        f(M, N, K, rowMajor(A, 0, transA ? M : K, transA), rowMajor(B, 0, transB ? K : N, transB), C, 0, N, acc);
        return Buffer.from(C.buffer).toString('base64');
      };
      expect(out(gemmSmall), `trial ${trial} M=${M} N=${N} K=${K}`).toBe(out(gemmScalar));
    }
  });
});
