// The WebAssembly matrix kernel takes k in blocks (src/eval/wasm-gemm.ts runTiles: each block's sums go on from
// the values C holds). Every output element must still be the one ordered sum over k from zero, as if k were
// never cut: checked bit for bit against that sum written out here (float64: a*b then +, each rounded to float64;
// float32: each product and each sum rounded to float32, as f32x4.mul and f32x4.add do), for K below, at and
// past the block size, with 1 and 2 threads.
import { afterAll, describe, expect, it } from 'vitest';
import { gemm, rowMajor, simdOn } from '../../src/eval/gemm.js';
import { KBLOCK } from '../../src/eval/wasm-gemm.js';
import { setThreads, stopThreads } from '../../src/eval/threads.js';
import { randn, rng } from '../helpers/build.js';
import { availableParallelism } from 'node:os';

afterAll(async () => { setThreads(Math.max(1, availableParallelism())); await stopThreads(); });

function orderedSum(M: number, N: number, K: number, A: ArrayLike<number>, B: ArrayLike<number>, f32: boolean): Float64Array {
  const C = new Float64Array(M * N);
  for (let i = 0; i < M; i++) {
    for (let j = 0; j < N; j++) {
      let s = 0;
      if (f32) for (let k = 0; k < K; k++) s = Math.fround(s + Math.fround(A[i * K + k]! * B[k * N + j]!));
      else for (let k = 0; k < K; k++) s += A[i * K + k]! * B[k * N + j]!;
      C[i * N + j] = s;
    }
  }
  return C;
}

describe('the matrix kernel in blocks of k', () => {
  it('gives the ordered sum over k for K across block boundaries, float32 and float64, 1 and 2 threads', () => {
    expect(simdOn()).toBe(true);
    expect(KBLOCK).toBeGreaterThan(1);
    const r = rng(5);
    for (const K of [1, 3, KBLOCK - 1, KBLOCK, KBLOCK + 1, 2 * KBLOCK + 7, 5 * KBLOCK - 3]) {
      for (const f32 of [false, true]) {
        // large enough for the threads to share it (src/eval/threads.ts PARALLEL_MIN_WORK) at the larger K
        const M = 96, N = 40 + Math.floor(r() * 40);
        const A = Float32Array.from(randn(r, M * K, 1)), B = Float32Array.from(randn(r, K * N, 1));
        const want = orderedSum(M, N, K, A, B, f32);
        for (const threads of [1, 2]) {
          setThreads(threads);
          const C = f32 ? new Float32Array(M * N) : new Float64Array(M * N);
          gemm(M, N, K, rowMajor(f32 ? A : Float64Array.from(A), 0, K), rowMajor(f32 ? B : Float64Array.from(B), 0, N), C, 0, N, false);
          let bad = -1;
          for (let e = 0; e < C.length && bad < 0; e++) if (!Object.is(C[e], want[e])) bad = e;
          expect(bad, `K=${K} ${f32 ? 'float32' : 'float64'} threads ${threads}: element ${bad} ${C[bad]} vs ${want[bad]}`).toBe(-1);
        }
      }
    }
  });
});
