// Conv, Gemm and MatMul split across worker threads give bit-identical results for any thread count (each
// output element is the same ordered sum whoever computes it). Seeded shapes, float32 and float64, plain and
// transposed/strided operands, accumulate on and off; then whole models through the evaluator.
import { afterAll, describe, expect, it } from 'vitest';
import { gemm, rowMajor, simdOn } from '../../src/eval/gemm.js';
import { bandsPosted, setThreads, stopThreads, PARALLEL_MIN_WORK } from '../../src/eval/threads.js';
import { runModel } from '../../src/eval/run.js';
import { chunkTiles, type TileSpan } from '../../src/eval/wasm-gemm.js';
import { parseModel } from '../../src/onnx/read.js';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { availableParallelism } from 'node:os';

afterAll(async () => { setThreads(Math.max(1, availableParallelism())); await stopThreads(); });

const bits = (a: Float32Array | Float64Array) => Buffer.from(a.buffer, a.byteOffset, a.byteLength).toString('base64');

describe('threaded matrix products', () => {
  it('gemm: identical bits for 1, 2 and 3 threads on seeded shapes', () => {
    expect(simdOn()).toBe(true);
    const r = rng(11);
    let big = 0;
    const posted = bandsPosted();
    for (let trial = 0; trial < 8; trial++) {
      const M = 8 + Math.floor(r() * 300), N = 1 + Math.floor(r() * 200), K = 16 + Math.floor(r() * 700);
      const f64 = trial % 2 === 1, transA = trial % 3 === 0, transB = trial % 4 === 1, acc = trial % 5 === 2;
      const A = Float64Array.from(randn(r, M * K, 1)), B = Float64Array.from(randn(r, K * N, 1));
      const Aop = f64 ? A : Float32Array.from(A), Bop = f64 ? B : Float32Array.from(B);
      const start = Float64Array.from(randn(r, M * N, 1));
      const out: string[] = [];
      for (const t of [1, 2, 3]) {
        setThreads(t);
        const C = f64 ? Float64Array.from(start) : Float32Array.from(start);
        gemm(M, N, K, rowMajor(Aop, 0, transA ? M : K, transA), rowMajor(Bop, 0, transB ? K : N, transB), C, 0, N, acc);
        out.push(bits(C));
      }
      if (M * N * K >= PARALLEL_MIN_WORK) big++;
      expect(out[1], `trial ${trial} M=${M} N=${N} K=${K}`).toBe(out[0]);
      expect(out[2], `trial ${trial}`).toBe(out[0]);
    }
    // the bands really went to workers on some of the shapes
    expect(big).toBeGreaterThan(0);
    expect(bandsPosted()).toBeGreaterThan(posted);
  });

  it('the chunks threads take cover every tile once, smaller towards the end', () => {
    for (const [t0, t1, chunk] of [[0, 128, 8], [3, 4, 8], [0, 37, 8], [5, 300, 32], [0, 9, 1], [0, 1000, 3]] as const) {
      const span = { t0, t1, chunk } as TileSpan;
      const seen: number[] = [];
      let i = 0, last = Infinity;
      for (let [a, b] = chunkTiles(span, i); a < b; [a, b] = chunkTiles(span, ++i)) {
        expect(b - a).toBeLessThanOrEqual(Math.min(chunk, last)); // never larger than the chunk before
        last = b - a;
        for (let t = a; t < b; t++) seen.push(t);
      }
      expect(seen, `${t0}..${t1} by ${chunk}`).toEqual(Array.from({ length: t1 - t0 }, (_, k) => t0 + k));
      expect(chunkTiles(span, i + 5)[0]).toBeGreaterThanOrEqual(chunkTiles(span, i + 5)[1]); // and then nothing
    }
  });

  it('float32 weights in float64 products (widened tile by tile on each thread): the bits of the weights widened up front, any thread count', () => {
    const r = rng(13);
    const posted = bandsPosted();
    for (let trial = 0; trial < 8; trial++) {
      // rows past a multiple of 4 and of the 32-row chunks, long sums, panels past 512 columns now and then
      const M = (trial < 4 ? 9 : 250) + Math.floor(r() * 260), N = (trial < 4 ? 1 : 60) + Math.floor(r() * (trial === 3 ? 700 : 120)), K = 100 + Math.floor(r() * 2000);
      const transA = trial % 3 === 2, acc = trial % 4 === 1;
      const A32 = Float32Array.from(randn(r, M * K, 1)), A64 = Float64Array.from(A32);
      const B = Float64Array.from(randn(r, K * N, 1)), start = Float64Array.from(randn(r, M * N, 1));
      const run = (A: Float32Array | Float64Array) => {
        const C = Float64Array.from(start);
        gemm(M, N, K, rowMajor(A, 0, transA ? M : K, transA), rowMajor(B, 0, N), C, 0, N, acc);
        return bits(C);
      };
      setThreads(1);
      const want = run(A64);
      for (const t of [1, 2, 3]) {
        setThreads(t);
        expect(run(A32), `trial ${trial} threads ${t} M=${M} N=${N} K=${K}`).toBe(want);
        expect(run(A32), `trial ${trial} threads ${t}, again`).toBe(want); // (the weight already in the kernel memory)
      }
    }
    expect(bandsPosted()).toBeGreaterThan(posted);
  });

  it('a conv stack and a dense head: identical outputs for 1, 2 and 3 threads, in float32 and float64', () => {
    const r = rng(12);
    const g = new GraphBuilder();
    g.input('x', [1, 64, 12, 12]).output('y');
    const w1 = g.init('w1', [128, 64, 3, 3], randn(r, 128 * 64 * 9, 0.05));
    const c1 = g.node('Conv', ['x', w1], { pads: [1, 1, 1, 1] });
    const w2 = g.init('w2', [96, 128, 3, 3], randn(r, 96 * 128 * 9, 0.05));
    const c2 = g.node('Conv', [c1, w2], { pads: [1, 1, 1, 1], strides: [2, 2] });
    const f = g.node('Flatten', [c2], { axis: 1 });
    g.node('Gemm', [f, g.init('fc', [96 * 36, 40], randn(r, 96 * 36 * 40, 0.02))], {}, { outputs: ['y'] });
    const model = parseModel(modelBytes(g), '.');
    const x = Float64Array.from(randn(r, 64 * 144, 1));
    for (const precision of ['float32', 'float64'] as const) {
      const out: string[] = [];
      for (const t of [1, 2, 3]) {
        setThreads(t);
        const y = runModel(model, new Map([['x', { type: 1, dims: [1, 64, 12, 12], data: x }]]), { precision }).get('y')!;
        out.push(bits(y.data));
      }
      expect(out[1], precision).toBe(out[0]);
      expect(out[2], precision).toBe(out[0]);
    }
  });
});
