// Large weights are decoded per step into reused float64 buffers (src/eval/run.ts). A weight that a kernel passes
// through to its result (Reshape and the other shape-only kernels) lives on in that result, so
// its buffer must not be handed to the next weight of the same size; and the matrix kernel's packed copy of a
// reused buffer must be forgotten. Checked against the weights themselves and against onnxruntime-node.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { runModel } from '../../src/eval/run.js';
import { runLockstep } from '../../src/eval/lockstep.js';
import { parseModel } from '../../src/onnx/read.js';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { runOrt } from '../helpers/ort.js';
import { readModelFile } from '../../src/onnx/read.js';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { readWholeUpTo } from '../../src/onnx/sparse-read.js';

const S = 300;
/** Positions where two arrays differ (a count, so a failure prints one number, not 90,000). */
const differing = (a: ArrayLike<number>, b: ArrayLike<number>) => { let n = Math.abs(a.length - b.length); for (let i = 0; i < Math.min(a.length, b.length); i++) if (!Object.is(a[i], b[i])) n++; return n; }; // 90,000-element weights: past the size kept decoded between steps

function model(seed: number): { bytes: Uint8Array; w1: number[]; w2: number[]; w3: number[] } {
  const r = rng(seed);
  const w1 = randn(r, S * S, 0.1), w2 = randn(r, S * S, 0.1), w3 = randn(r, S * S, 0.1);
  const g = new GraphBuilder();
  g.input('x', [2, S]).output('passed', [S * S]).output('y', [2, S]);
  const W1 = g.init('w1', [S, S], w1), W2 = g.init('w2', [S, S], w2), W3 = g.init('w3', [S, S], w3);
  const flat = g.init('flat', [1], [S * S], 7);
  g.node('Reshape', [W1, flat], {}, { outputs: ['passed'] }); // the result is W1's own array
  const m2 = g.node('MatMul', ['x', W2]);
  const m3 = g.node('MatMul', [m2, W3]);
  g.node('MatMul', [m3, W2], {}, { outputs: ['y'] }); // W2 again, after W3 took a reused buffer
  return { bytes: modelBytes(g, { opset: 13 }), w1, w2, w3 };
}

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('reused weight buffers', () => {
  for (const seed of [1, 2]) {
    it(`seed ${seed}: a passed-through weight keeps its values; products agree with onnxruntime-node`, async () => {
      const { bytes, w1 } = model(seed);
      const m = parseModel(bytes, '.');
      const x = Float64Array.from(randn(rng(seed + 10), 2 * S, 1));
      const inputs = new Map([['x', { type: 1, dims: [2, S], data: x }]]);
      const want = Float64Array.from(Float32Array.from(w1));
      const ort = await runOrt(bytes, { x: { dims: [2, S], data: Float32Array.from(x) } });
      for (let round = 0; round < 2; round++) {
        const out = runModel(m, inputs, { precision: 'float64' });
        expect(differing(out.get('passed')!.data, want)).toBe(0);
        const y = out.get('y')!.data, oy = ort.y!.data;
        let off = 0;
        for (let i = 0; i < y.length; i++) if (!(Math.abs(y[i]! - oy[i]!) < 1e-4 * (1 + Math.abs(oy[i]!)))) off++;
        expect(off).toBe(0);
      }
      // two probes and two models in lockstep (the check's way), shared weight caches
      const [[a0, a1], [b0]] = runLockstep([
        { model: m, precision: 'float64', probes: [inputs, inputs] },
        { model: m, precision: 'float64', probes: [inputs] },
      ]);
      for (const o of [a0!, a1!, b0!]) expect(differing(o.get('passed')!.data, want)).toBe(0);
      expect(differing(a1!.get('y')!.data, a0!.get('y')!.data)).toBe(0);
      expect(differing(b0!.get('y')!.data, a0!.get('y')!.data)).toBe(0);
    });
  }

  it('two convolutions whose same-sized weights share one reused buffer: the second is not computed with the first\'s packed tiles', async () => {
    const r = rng(7);
    const C = 96, dims = [C, C, 3, 3]; // 82,944 elements each
    const g = new GraphBuilder();
    g.input('x', [1, C, 6, 6]).output('y', [1, C, 6, 6]);
    const c1 = g.node('Conv', ['x', g.init('w1', dims, randn(r, C * C * 9, 0.05))], { pads: [1, 1, 1, 1] });
    g.node('Conv', [c1, g.init('w2', dims, randn(r, C * C * 9, 0.05))], { pads: [1, 1, 1, 1] }, { outputs: ['y'] });
    const bytes = modelBytes(g, { opset: 13 });
    const x = Float64Array.from(randn(r, C * 36, 1));
    const ort = await runOrt(bytes, { x: { dims: [1, C, 6, 6], data: Float32Array.from(x) } });
    const y = runModel(parseModel(bytes, '.'), new Map([['x', { type: 1, dims: [1, C, 6, 6], data: x }]]), { precision: 'float64' }).get('y')!.data;
    let off = 0;
    for (let i = 0; i < y.length; i++) if (!(Math.abs(y[i]! - ort.y!.data[i]!) < 1e-4 * (1 + Math.abs(ort.y!.data[i]!)))) off++;
    expect(off).toBe(0);
  });

  it('a large float32 weight read by a matrix product as stored (no float64 copy) gives the bits of the decoded weight', () => {
    for (const op of ['Conv', 'Gemm', 'MatMul'] as const) {
      const build = (form: 'raw' | 'typed') => {
        const r = rng(21);
        const g = new GraphBuilder();
        if (op === 'Conv') {
          g.input('x', [1, 96, 5, 5]).output('y');
          g.node('Conv', ['x', g.init('w', [96, 96, 3, 3], randn(r, 96 * 96 * 9, 0.05), 1, form)], { pads: [1, 1, 1, 1] }, { outputs: ['y'] });
        } else {
          g.input('x', [3, 300]).output('y');
          const w = g.init('w', [300, 300], randn(r, 90000, 0.05), 1, form);
          g.node(op, ['x', w], op === 'Gemm' ? { transB: 1 } : {}, { outputs: ['y'] });
        }
        return parseModel(modelBytes(g, { opset: 13 }), '.');
      };
      const dims = op === 'Conv' ? [1, 96, 5, 5] : [3, 300];
      const x = Float64Array.from(randn(rng(22), dims.reduce((a, b) => a * b), 1));
      const run = (form: 'raw' | 'typed') => runModel(build(form), new Map([['x', { type: 1, dims, data: x }]]), { precision: 'float64' }).get('y')!.data;
      const asStored = run('raw'), decoded = run('typed'); // float_data never takes the as-stored path
      expect(asStored).toBeInstanceOf(Float64Array);
      expect(differing(asStored, decoded), op).toBe(0);
    }
  });

  it('weights still on disk, read as stored into reused buffers: the same bits as the model held in memory, run after run', () => {
    const r = rng(23);
    const C = 96, dims = [C, C, 3, 3];
    const g = new GraphBuilder();
    g.input('x', [1, C, 5, 5]).output('y');
    const c1 = g.node('Conv', ['x', g.init('w1', dims, randn(r, C * C * 9, 0.05))], { pads: [1, 1, 1, 1] });
    const c2 = g.node('Conv', [c1, g.init('w2', dims, randn(r, C * C * 9, 0.05))], { pads: [1, 1, 1, 1] });
    g.node('Conv', [c2, g.init('w3', dims, randn(r, C * C * 9, 0.05))], { pads: [1, 1, 1, 1] }, { outputs: ['y'] });
    const bytes = modelBytes(g, { opset: 13 });
    const file = join(mkdtempSync(join(tmpdir(), 'pleat-reuse-')), 'three.onnx');
    writeFileSync(file, bytes);
    const x = Float64Array.from(randn(r, C * 25, 1));
    const inputs = new Map([['x', { type: 1, dims: [1, C, 5, 5], data: x }]]);
    const want = runModel(parseModel(bytes, '.'), inputs, { precision: 'float64' }).get('y')!.data;
    const onDisk = readModelFile(file);
    for (let round = 0; round < 3; round++) {
      const [[a, b]] = runLockstep([{ model: onDisk, precision: 'float64', probes: [inputs, inputs] }]);
      expect(differing(a!.get('y')!.data, want), `round ${round}`).toBe(0);
      expect(differing(b!.get('y')!.data, want), `round ${round}`).toBe(0);
      expect(differing(runModel(onDisk, inputs, { precision: 'float64' }).get('y')!.data, want)).toBe(0);
    }
  });
});
