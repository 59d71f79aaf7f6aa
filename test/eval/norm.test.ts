// Normalization kernels against onnxruntime-node on seeded random shapes, and BatchNormalization against the
// formula of the ONNX operator documentation (Operators.md: Y = (X - mean) / sqrt(var + epsilon) * scale + B).
import { describe, expect, it } from 'vitest';
import { f, randn, rng, uniform, modelBytes } from '../helpers/build.js';
import { checkOp, oneNode, runBoth, type In } from './harness.js';
import { maxDiff } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import { isPleatError } from '../../src/errors.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
const prod = (d: number[]) => d.reduce((a, b) => a * b, 1);

function randDims(r: () => number, minRank: number, maxRank: number): number[] {
  const rank = int(r, minRank, maxRank);
  return Array.from({ length: rank }, () => int(r, 1, 5));
}

describe('BatchNormalization vs onnxruntime-node', () => {
  it('per-channel inference form at opsets 7, 9, 14, 15 (rank 2 to 5)', async () => {
    for (let seed = 1; seed <= 24; seed++) {
      const r = rng(seed);
      const dims = randDims(r, 2, 5), C = dims[1]!;
      const opset = [7, 9, 14, 15][seed % 4]!;
      const ins: In[] = [
        { name: 'x', dims, data: randn(r, prod(dims), 2, 0.5) },
        { name: 's', dims: [C], data: randn(r, C), init: true },
        { name: 'b', dims: [C], data: randn(r, C), init: true },
        { name: 'm', dims: [C], data: randn(r, C), init: r() < 0.5 },
        { name: 'v', dims: [C], data: uniform(r, C, 0.1, 3), init: true },
      ];
      await checkOp('BatchNormalization', opset, ins, seed % 3 ? { epsilon: f(1e-3) } : {}, ['y'], 1e-5, `seed ${seed} [${dims}]`);
    }
  });
  it('opset 6 (is_test=1) against onnxruntime-node at opset 7, which has no opset-6 kernel; the operator docs give both one formula', async () => {
    for (let seed = 1; seed <= 6; seed++) {
      const r = rng(seed + 30);
      const dims = randDims(r, 2, 4), C = dims[1]!;
      const ins: In[] = [
        { name: 'x', dims, data: randn(r, prod(dims)) },
        { name: 's', dims: [C], data: randn(r, C), init: true }, { name: 'b', dims: [C], data: randn(r, C), init: true },
        { name: 'm', dims: [C], data: randn(r, C), init: true }, { name: 'v', dims: [C], data: uniform(r, C, 0.1, 3), init: true },
      ];
      const ref = (await runBoth(oneNode('BatchNormalization', ins, {}, ['y']), ins, 7)).ort.y!;
      const model = parseModel(modelBytes(oneNode('BatchNormalization', ins, { is_test: 1 }, ['y']), { opset: 6 }), '.');
      const y = runModel(model, new Map([['x', { type: 1, dims, data: Float64Array.from(ins[0]!.data) }]]), { precision: 'float64' }).get('y')!;
      const { maxAbs, scale } = maxDiff(y.data, ref.data);
      expect(maxAbs).toBeLessThanOrEqual(1e-5 * Math.max(scale, 1e-3));
    }
  });
  it('legacy spatial=0 (per-activation statistics) at opset 7', async () => {
    for (let seed = 1; seed <= 8; seed++) {
      const r = rng(seed + 50);
      const dims = [int(r, 1, 3), int(r, 1, 4), int(r, 1, 4), int(r, 1, 4)], S = prod(dims.slice(1)), pd = dims.slice(1);
      const ins: In[] = [
        { name: 'x', dims, data: randn(r, prod(dims)) },
        { name: 's', dims: pd, data: randn(r, S), init: true },
        { name: 'b', dims: pd, data: randn(r, S), init: true },
        { name: 'm', dims: pd, data: randn(r, S), init: true },
        { name: 'v', dims: pd, data: uniform(r, S, 0.1, 3), init: true },
      ];
      await checkOp('BatchNormalization', 7, ins, { spatial: 0 }, ['y'], 1e-5, `seed ${seed} [${dims}]`);
    }
  });
  const bnIns: In[] = [
    { name: 'x', dims: [1, 2, 1, 1], data: [1.5, 2] },
    { name: 's', dims: [2], data: [1, 2], init: true }, { name: 'b', dims: [2], data: [0, 1], init: true },
    { name: 'm', dims: [2], data: [0.5, 0], init: true }, { name: 'v', dims: [2], data: [1, 4], init: true },
  ];
  const feed = new Map([['x', { type: 1, dims: [1, 2, 1, 1], data: Float64Array.from([1.5, 2]) }]]);
  it('matches the documented formula on hand-computed numbers', () => {
    const model = parseModel(modelBytes(oneNode('BatchNormalization', bnIns, { epsilon: f(0) }, ['y']), { opset: 15 }), '.');
    // (1.5-0.5)/1*1+0 = 1; (2-0)/2*2+1 = 3
    expect(Array.from(runModel(model, feed, { precision: 'float64' }).get('y')!.data)).toEqual([1, 3]);
  });
  it('refuses training_mode=1 with an unsupported-op error naming the node', () => {
    const model = parseModel(modelBytes(oneNode('BatchNormalization', bnIns, { training_mode: 1 }, ['y']), { opset: 15 }), '.');
    let err: unknown;
    try { runModel(model, feed, { precision: 'float64' }); } catch (e) { err = e; }
    expect(isPleatError(err) && err.kind === 'unsupported-op').toBe(true);
    expect((err as Error).message).toContain('batchnormalization_under_test');
    expect((err as Error).message).toContain('training_mode');
    expect((err as Error).message).not.toContain('\n');
  });
});

describe('InstanceNormalization, LayerNormalization, GroupNormalization vs onnxruntime-node', () => {
  it('InstanceNormalization (opset 6, rank 3 to 5)', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 200);
      const dims = [int(r, 1, 3), int(r, 1, 4), ...randDims(r, 1, 3).map((d) => d + 1)], C = dims[1]!;
      await checkOp('InstanceNormalization', 6, [
        { name: 'x', dims, data: randn(r, prod(dims), 3, 1) },
        { name: 's', dims: [C], data: randn(r, C), init: true },
        { name: 'b', dims: [C], data: randn(r, C), init: true },
      ], { epsilon: f(1e-4) }, ['y'], 1e-5, `seed ${seed} [${dims}]`);
    }
  });
  it('LayerNormalization (opset 17, every axis, optional B, Mean and InvStdDev outputs)', async () => {
    for (let seed = 1; seed <= 16; seed++) {
      const r = rng(seed + 300);
      const dims = randDims(r, 1, 4).map((d) => d + 1), rank = dims.length;
      const axis = int(r, -rank, rank - 1), a = axis < 0 ? axis + rank : axis, nd = dims.slice(a);
      const ins: In[] = [{ name: 'x', dims, data: randn(r, prod(dims), 2, 1) }, { name: 's', dims: nd, data: randn(r, prod(nd)), init: true }];
      if (seed % 2) ins.push({ name: 'b', dims: nd, data: randn(r, prod(nd)), init: true });
      await checkOp('LayerNormalization', 17, ins, { axis }, ['y', 'mean', 'istd'], 1e-5, `seed ${seed} [${dims}] axis ${axis}`);
    }
  });
  // Scale and B with leading size-1 axes ([1, D] for [D]) were refused as "do not broadcast to [D]", although
  // onnxruntime runs them (it takes Scale/B broadcastable to X.shape[axis:], of rank at most X's).
  it('LayerNormalization with Scale/B of leading size-1 axes', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 350);
      const dims = [int(r, 1, 3), int(r, 2, 4), int(r, 2, 5)];
      const axis = seed % 3 === 0 ? -2 : -1, nd = dims.slice(axis + 3);
      const pdims = seed % 2 ? [1, ...nd] : [...new Array<number>(3 - nd.length).fill(1), ...nd];
      const ins: In[] = [{ name: 'x', dims, data: randn(r, prod(dims), 2, 1) }, { name: 's', dims: pdims, data: randn(r, prod(pdims)), init: true }];
      if (seed % 4 < 2) ins.push({ name: 'b', dims: pdims, data: randn(r, prod(pdims)), init: true });
      await checkOp('LayerNormalization', 17, ins, { axis }, ['y'], 1e-5, `seed ${seed} [${dims}] axis ${axis} scale [${pdims}]`);
    }
  });
  // A Scale that varies over the leading axes too: the function body's Mul and Add (numpy rules) take it, though
  // onnxruntime does not; checked against the formula Y = (x - mean) / sqrt(var + eps) * Scale + B per element.
  it('LayerNormalization with a Scale varying over a leading axis, against the formula', () => {
    const r = rng(377);
    const dims = [2, 3, 4], eps = 1e-5;
    const x = randn(r, 24, 2, 1), sc = randn(r, 12), b = randn(r, 12);
    const g = oneNode('LayerNormalization', [
      { name: 'x', dims, data: x }, { name: 's', dims: [3, 4], data: sc, init: true }, { name: 'b', dims: [3, 4], data: b, init: true },
    ], { axis: -1, epsilon: f(eps) }, ['y']);
    const model = parseModel(modelBytes(g, { opset: 17 }), '.');
    const got = runModel(model, new Map([['x', { type: 1, dims, data: Float64Array.from(x) }]]), { precision: 'float64' }).get('y')!.data;
    for (let row = 0; row < 6; row++) {
      const xs = Array.from(x.subarray(row * 4, row * 4 + 4));
      const mean = xs.reduce((a, v) => a + v, 0) / 4;
      const v = xs.reduce((a, u) => a + (u - mean) ** 2, 0) / 4;
      for (let i = 0; i < 4; i++) {
        const k = (row % 3) * 4 + i; // the Scale row for this row of X (axis 1 of X), as numpy broadcasting picks
        expect(got[row * 4 + i]!).toBeCloseTo((xs[i]! - mean) / Math.sqrt(v + eps) * sc[k]! + b[k]!, 6);
      }
    }
  });
  it('GroupNormalization (opset 18 per-group scale, opset 21 per-channel scale)', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 400);
      const G = int(r, 1, 3), C = G * int(r, 1, 3);
      const dims = [int(r, 1, 2), C, ...randDims(r, 1, 2).map((d) => d + 1)];
      const opset = seed % 2 ? 18 : 21, P = opset === 18 ? G : C;
      await checkOp('GroupNormalization', opset, [
        { name: 'x', dims, data: randn(r, prod(dims), 2, 1) },
        { name: 's', dims: [P], data: randn(r, P), init: true },
        { name: 'b', dims: [P], data: randn(r, P), init: true },
      ], { num_groups: G, epsilon: f(1e-4) }, ['y'], 1e-5, `seed ${seed} [${dims}] G ${G}`);
    }
  });
});
