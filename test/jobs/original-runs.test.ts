// Fold's whole-model check runs the original model on its own thread (src/verify/original-runs.ts), from the
// input file, while the main thread folds, proves and writes; compare() then runs only the folded model and takes
// the original's outputs from that thread (CompareOptions.outputsOfA) when the thread's probe inputs are its own
// bit for bit. The report and the written bytes must be those of the check run all on the main thread.
import { afterEach, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { originalRunsStarted, setOriginalRunsMinBytes, startOriginalRuns } from '../../src/verify/original-runs.js';
import { compare, probesOfATakenElsewhere } from '../../src/verify/compare.js';
import { readModelFile } from '../../src/onnx/read.js';
import { setThreads, stopThreads } from '../../src/eval/threads.js';
import { availableParallelism } from 'node:os';

const DEFAULT_MIN = 64 * 1024 * 1024;

function convBnModel(dir: string, seed: number, channels: number, batch: number | string = 1): string {
  const r = rng(seed);
  const g = new GraphBuilder();
  g.input('x', [batch, channels, 6, 6]).output('y');
  let h = 'x';
  for (let k = 0; k < 3; k++) {
    const w = g.init(`w${k}`, [channels, channels, 3, 3], randn(r, channels * channels * 9, 0.08));
    const c = g.node('Conv', [h, w], { pads: [1, 1, 1, 1] }, { name: `conv${k}` });
    const p = (n: string, v: Float32Array) => g.init(`${n}${k}`, [channels], v);
    const bn = g.node('BatchNormalization', [c, p('s', uniform(r, channels, 0.5, 1.5)), p('b', randn(r, channels, 0.2)), p('m', randn(r, channels, 0.3)), p('v', uniform(r, channels, 1e-4, 2))], { epsilon: f(1e-5) }, { name: `bn${k}` });
    h = g.node('Relu', [bn], {}, { name: `relu${k}`, outputs: k === 2 ? ['y'] : undefined });
  }
  const path = join(dir, `m${seed}.onnx`);
  writeFileSync(path, modelBytes(g));
  return path;
}

afterEach(async () => {
  setOriginalRunsMinBytes(DEFAULT_MIN);
  setThreads(Math.max(2, availableParallelism()));
});

describe("the original model's check runs on their own thread", () => {
  const dir = mkdtempSync(join(tmpdir(), 'pleat-original-runs-'));

  for (const [seed, channels, probes] of [[1, 32, 2], [2, 48, 3], [3, 16, 1]] as const) {
    it(`seed ${seed}, ${channels} channels, ${probes} probes: the same report and bytes as the check on the main thread`, () => {
      setThreads(2);
      const src = convBnModel(dir, seed, channels);
      setOriginalRunsMinBytes(Infinity);
      const before = originalRunsStarted();
      const here = foldFile(src, join(dir, `here${seed}.onnx`), { probes });
      expect(originalRunsStarted()).toBe(before);
      setOriginalRunsMinBytes(0);
      const taken = probesOfATakenElsewhere();
      const beside = foldFile(src, join(dir, `beside${seed}.onnx`), { probes });
      expect(originalRunsStarted()).toBe(before + 1);
      expect(probesOfATakenElsewhere()).toBe(taken + probes);
      expect(beside.check?.status).toBe('passed');
      expect({ ...beside, output: null }).toEqual({ ...here, output: null });
      expect(Buffer.compare(readFileSync(join(dir, `beside${seed}.onnx`)), readFileSync(join(dir, `here${seed}.onnx`)))).toBe(0);
    });
  }

  it('one thread asked for (--threads 1), or inputs given: no thread', () => {
    const src = convBnModel(dir, 4, 16);
    setOriginalRunsMinBytes(0);
    const before = originalRunsStarted();
    setThreads(1);
    foldFile(src, join(dir, 'one.onnx'), { threads: 1 });
    expect(originalRunsStarted()).toBe(before);
    setThreads(2);
    const x = { type: 1, dims: [1, 16, 6, 6], data: Float64Array.from(randn(rng(9), 16 * 36, 1)) };
    foldFile(src, join(dir, 'given.onnx'), { inputs: { x } });
    expect(originalRunsStarted()).toBe(before);
  });

  it('probes whose values might need more than a quarter of the probe memory limit keep the check here', () => {
    setThreads(2);
    const src = convBnModel(dir, 6, 48);
    setOriginalRunsMinBytes(0);
    const before = originalRunsStarted();
    // 1 x 48 x 6 x 6 float64 values are 13.5 KiB each; the graph holds about a dozen of them per probe
    const small = foldFile(src, join(dir, 'small.onnx'), { maxProbeMemory: 1 << 20 });
    expect(originalRunsStarted()).toBe(before);
    expect(small.check?.status).toBe('passed');
    foldFile(src, join(dir, 'roomy.onnx'), { maxProbeMemory: 64 << 20 });
    expect(originalRunsStarted()).toBe(before + 1);
  });

  it("compare takes A's outputs from the thread only for its very probe inputs", () => {
    setThreads(2);
    const src = convBnModel(dir, 5, 16);
    const a = readModelFile(src), b = readModelFile(src);
    setOriginalRunsMinBytes(0);
    const runs = startOriginalRuns(src, a, { seed: 0, probes: 2, shapes: new Map(), dims: new Map() })!;
    expect(runs).toBeDefined();
    const plain = compare(a, b, { probes: 2, budget: false });
    // the thread's own outputs: the same report
    expect(compare(a, b, { probes: 2, budget: false, outputsOfA: runs })).toEqual(plain);
    // outputs changed on the way: compare used them (B now differs from "A")
    const shifted = {
      has: (p: number) => runs.has(p),
      get: (p: number) => {
        const got = runs.get(p)!;
        return { inputs: got.inputs, outputs: new Map([...got.outputs].map(([k, v]) => [k, { ...v, data: v.data.map((e) => e + 1) }])) };
      },
    };
    const taken = probesOfATakenElsewhere();
    const used = compare(a, b, { probes: 2, budget: false, outputsOfA: shifted });
    expect(probesOfATakenElsewhere()).toBe(taken + 2);
    expect(used.outputs[0]!.metrics!.maxAbs).toBeCloseTo(1, 12);
    // the same changed outputs for other inputs (another seed): ignored, A runs here
    expect(compare(a, b, { probes: 2, budget: false, seed: 7, outputsOfA: shifted })).toEqual(compare(a, b, { probes: 2, budget: false, seed: 7 }));
    expect(probesOfATakenElsewhere()).toBe(taken + 2);
    runs.stop();
  });
});

afterEach(async () => { await stopThreads(); });
