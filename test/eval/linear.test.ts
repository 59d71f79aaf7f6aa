// Gemm and MatMul against onnxruntime-node on seeded random shapes (transposes, alpha/beta, C broadcasting,
// batched and broadcast MatMul, 1-D operands, sizes crossing the GEMM block edges).
import { describe, it } from 'vitest';
import { f, randn, rng, type AttrIn } from '../helpers/build.js';
import { checkOp, type In } from './harness.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
const prod = (d: number[]) => d.reduce((a, b) => a * b, 1);

describe('Gemm vs onnxruntime-node', () => {
  it('transA/transB, alpha/beta, C of every broadcastable shape, opsets 7/9/11/13', async () => {
    for (let seed = 1; seed <= 30; seed++) {
      const r = rng(seed);
      const M = int(r, 1, 9), N = int(r, 1, 9), K = int(r, 1, 9);
      const tA = int(r, 0, 1), tB = int(r, 0, 1);
      const opset = [7, 9, 11, 13][seed % 4]!;
      const cShape = [[M, N], [N], [1, N], [M, 1], [1], [], null][int(r, 0, opset >= 11 ? 6 : 5)];
      const attrs: Record<string, AttrIn> = { transA: tA, transB: tB };
      if (r() < 0.5) attrs.alpha = f(0.5 + r());
      if (r() < 0.5) attrs.beta = f(-1 + 2 * r());
      const ins: In[] = [
        { name: 'a', dims: tA ? [K, M] : [M, K], data: randn(r, M * K) },
        { name: 'b', dims: tB ? [N, K] : [K, N], data: randn(r, K * N), init: r() < 0.5 },
      ];
      if (cShape) ins.push({ name: 'c', dims: cShape, data: randn(r, prod(cShape)), init: true });
      await checkOp('Gemm', opset, ins, attrs, ['y'], 1e-5, `seed ${seed} M${M} N${N} K${K} C[${cShape}]`);
    }
  });
  it('a layer larger than one GEMM block', async () => {
    const r = rng(99);
    await checkOp('Gemm', 13, [
      { name: 'a', dims: [7, 300], data: randn(r, 2100) },
      { name: 'b', dims: [133, 300], data: randn(r, 133 * 300), init: true },
      { name: 'c', dims: [133], data: randn(r, 133), init: true },
    ], { transB: 1 });
  });
});

describe('MatMul vs onnxruntime-node', () => {
  it('1-D, 2-D, batched and broadcast batch shapes (opsets 9 and 13)', async () => {
    for (let seed = 1; seed <= 40; seed++) {
      const r = rng(seed + 1000);
      const M = int(r, 1, 7), N = int(r, 1, 7), K = int(r, 1, 7);
      const batchA = Array.from({ length: int(r, 0, 2) }, () => int(r, 1, 3));
      const batchB = Array.from({ length: int(r, 0, 2) }, () => int(r, 1, 3));
      // make batch shapes broadcast: where both have an axis, one of them is 1 or they agree
      const nb = Math.min(batchA.length, batchB.length);
      for (let i = 1; i <= nb; i++) {
        const a = batchA[batchA.length - i]!, b = batchB[batchB.length - i]!;
        if (a !== b && a !== 1 && b !== 1) batchB[batchB.length - i] = r() < 0.5 ? 1 : a;
      }
      const aDims = r() < 0.15 ? [K] : [...batchA, M, K];
      const bDims = r() < 0.15 ? [K] : [...batchB, K, N];
      await checkOp('MatMul', seed % 2 ? 13 : 9, [
        { name: 'a', dims: aDims, data: randn(r, prod(aDims)) },
        { name: 'b', dims: bDims, data: randn(r, prod(bDims)), init: r() < 0.5 },
      ], {}, ['y'], 1e-5, `seed ${seed} a[${aDims}] b[${bDims}]`);
    }
  });
  it('stacked batches against a 2-D weight, crossing block edges', async () => {
    const r = rng(5);
    await checkOp('MatMul', 13, [
      { name: 'a', dims: [2, 33, 270], data: randn(r, 2 * 33 * 270) },
      { name: 'b', dims: [270, 19], data: randn(r, 270 * 19), init: true },
    ]);
  });
});
