// A Conv's float32 weight still on disk is read straight into the matrix kernel's memory, where the float64
// product would copy it (src/eval/run.ts convStaging, src/eval/gemm.ts stagingFor). Nothing else may then
// clobber it while it is alive, and a product that finds another weight there must copy its own in. Checked bit
// for bit against the same models with every weight in memory (never staged), run alone and in lockstep with
// several probes, with depthwise and grouped convolutions and a second Conv in between, over seeded shapes.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { parseModel, readModelFile } from '../../src/onnx/read.js';
import { runLockstep } from '../../src/eval/lockstep.js';
import { runModel } from '../../src/eval/run.js';
import { stagedProducts } from '../../src/eval/gemm.js';
import { setThreads, stopThreads } from '../../src/eval/threads.js';
import { availableParallelism } from 'node:os';
import type { Value } from '../../src/eval/value.js';
import { readWholeUpTo } from '../../src/onnx/sparse-read.js';

afterAll(async () => { setThreads(Math.max(1, availableParallelism())); await stopThreads(); });

const bits = (v: Value) => Buffer.from(v.data.buffer, v.data.byteOffset, v.data.byteLength).toString('base64');

/** Conv (staged) -> depthwise Conv -> grouped Conv -> Conv (staged), channel counts from the seed. */
function model(seed: number): Uint8Array {
  const r = rng(seed);
  const c = 80 + Math.floor(r() * 40), m = 130 + Math.floor(r() * 11); // m not always a multiple of 4
  const g = new GraphBuilder();
  g.input('x', [1, c, 5, 5]).output('y');
  const w0 = g.init('w0', [m, c, 3, 3], randn(r, m * c * 9, 0.1));
  const a = g.node('Conv', ['x', w0], { pads: [1, 1, 1, 1] }, { name: 'conv0', outputs: ['a'] });
  const dw = g.init('dw', [m, 1, 3, 3], randn(r, m * 9, 0.3));
  const b = g.node('Conv', [a, dw], { group: m, pads: [1, 1, 1, 1] }, { name: 'depthwise', outputs: ['b'] });
  const half = Math.floor(m / 2) * 2;
  const sl = g.node('Slice', [b, g.init('st', [1], [0], 7), g.init('en', [1], [half], 7), g.init('ax', [1], [1], 7)], {}, { name: 'slice', outputs: ['bs'] });
  const wg = g.init('wg', [half, half / 2, 3, 3], randn(r, half * (half / 2) * 9, 0.1));
  const d = g.node('Conv', [sl, wg], { group: 2, pads: [1, 1, 1, 1] }, { name: 'grouped', outputs: ['d'] });
  const w3 = g.init('w3', [m, half, 3, 3], randn(r, m * half * 9, 0.1));
  g.node('Conv', [d, w3], { pads: [1, 1, 1, 1] }, { name: 'conv3', outputs: ['y'] });
  return modelBytes(g);
}

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('Conv weights read straight into the kernel memory', () => {
  const dir = mkdtempSync(join(tmpdir(), 'pleat-staging-'));
  for (const threads of [1, 2]) {
    it(`${threads} thread(s): the bits of the same model with its weights in memory, alone and in lockstep`, () => {
      setThreads(threads);
      for (const seed of [1, 2, 3]) {
        const bytes = model(seed);
        const path = join(dir, `m${seed}.onnx`);
        writeFileSync(path, bytes);
        const onDisk = readModelFile(path), inMemory = parseModel(Uint8Array.from(bytes), dir);
        const r = rng(100 + seed);
        const dims = onDisk.graph.inputs[0]!.shape!.map((d) => Number(d));
        const probe = () => new Map([['x', { type: 1, dims, data: Float64Array.from(randn(r, dims.reduce((p, q) => p * q, 1), 1)) } as Value]]);
        const probes = [probe(), probe(), probe()];
        const want = runLockstep([{ model: inMemory, precision: 'float64', probes }])[0]!.map((o) => bits(o.get('y')!));
        const before = stagedProducts();
        const got = runLockstep([{ model: onDisk, precision: 'float64', probes }])[0]!.map((o) => bits(o.get('y')!));
        expect(got, `seed ${seed}`).toEqual(want);
        // conv0 and conv3 were staged (each once per lockstep pass; the later probes reuse the packed weight)
        expect(stagedProducts() - before, `seed ${seed}`).toBe(2);
        // both models in lockstep (the sides alternate through the kernel memory), and a plain run
        const both = runLockstep([{ model: onDisk, precision: 'float64', probes }, { model: inMemory, precision: 'float64', probes }]);
        expect(both[0]!.map((o) => bits(o.get('y')!))).toEqual(want);
        expect(both[1]!.map((o) => bits(o.get('y')!))).toEqual(want);
        expect(bits(runModel(onDisk, probes[1]!, { precision: 'float64' }).get('y')!)).toBe(want[1]);
      }
    });
  }
});
