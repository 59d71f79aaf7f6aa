// The quantization report of a file fold is worked out on a worker thread (src/jobs/quant-beside.ts) from the
// input file and the written file, beside the writing and the whole-model check. It must give the rows the
// main thread gives from the model in memory (quantReadiness, src/fold/quant.ts), write the same bytes, and stay
// on the main thread where the figures are needed first (a gate naming sqnr) or differ from the written weights
// (--store float16). Small models here: the thread is switched on for them through setQuantBesideMinBytes.
import { foldText } from '../../src/report/ledger-text.js';
import { afterAll, afterEach, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { quantThreadsAnswered, quantThreadsStarted, setQuantBesideMinBytes } from '../../src/jobs/quant-beside.js';
import { readWholeUpTo } from '../../src/onnx/sparse-read.js';

const DEFAULT_MIN = 64 * 1024 * 1024;

/** Conv + BatchNormalization + Relu, twice; 48 channels leave the weights on disk in the reader. */
function convBnModel(dir: string, seed: number, channels: number, named = true): string {
  const r = rng(seed);
  const g = new GraphBuilder();
  g.input('x', [1, channels, 5, 5]).output('y');
  let h = 'x';
  for (let k = 0; k < 2; k++) {
    const w = g.init(`w${k}`, [channels, channels, 3, 3], randn(r, channels * channels * 9, 0.08));
    const c = g.node('Conv', [h, w], { pads: [1, 1, 1, 1] }, { name: named ? `conv${k}` : '', outputs: [`c${k}`] });
    const p = (n: string, v: Float32Array) => g.init(`${n}${k}`, [channels], v);
    // near-zero variances in a few channels: a spread the report must see
    const bn = g.node('BatchNormalization', [c, p('s', uniform(r, channels, 0.5, 1.5)), p('b', randn(r, channels, 0.2)), p('m', randn(r, channels, 0.3)), p('v', uniform(r, channels, 1e-4, 2))], { epsilon: f(1e-5) }, { name: `bn${k}` });
    h = g.node('Relu', [bn], {}, { name: `relu${k}`, outputs: k === 1 ? ['y'] : undefined });
  }
  const path = join(dir, `m${seed}${named ? '' : 'u'}.onnx`);
  writeFileSync(path, modelBytes(g));
  return path;
}

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('the quantization report on its own thread', () => {
  const dir = mkdtempSync(join(tmpdir(), 'pleat-quant-beside-'));
  afterEach(() => setQuantBesideMinBytes(DEFAULT_MIN));

  for (const [seed, channels, named] of [[1, 48, true], [2, 16, false], [3, 64, true]] as const) {
    it(`seed ${seed}, ${channels} channels${named ? '' : ', unnamed layers'}: the same rows and bytes as on the main thread`, () => {
      const src = convBnModel(dir, seed, channels, named);
      setQuantBesideMinBytes(Infinity);
      const before = quantThreadsStarted();
      const here = foldFile(src, join(dir, `here${seed}.onnx`));
      expect(quantThreadsStarted()).toBe(before);
      setQuantBesideMinBytes(0);
      const answered = quantThreadsAnswered();
      const beside = foldFile(src, join(dir, `beside${seed}.onnx`));
      expect(quantThreadsStarted()).toBe(before + 1);
      expect(quantThreadsAnswered()).toBe(answered + 1);
      expect(here.quantization).toHaveLength(2);
      expect(beside.quantization).toEqual(here.quantization);
      expect({ ...beside, output: null }).toEqual({ ...here, output: null });
      expect(Buffer.compare(readFileSync(join(dir, `beside${seed}.onnx`)), readFileSync(join(dir, `here${seed}.onnx`)))).toBe(0);
    });
  }

  it('a folded model written with a side file: the thread reads the staged side file too', () => {
    const src = convBnModel(dir, 6, 48);
    setQuantBesideMinBytes(Infinity);
    const here = foldFile(src, join(dir, 'ext-here.onnx'), { externalThreshold: 1024 });
    setQuantBesideMinBytes(0);
    const answered = quantThreadsAnswered();
    const beside = foldFile(src, join(dir, 'ext-beside.onnx'), { externalThreshold: 1024 });
    expect(quantThreadsAnswered()).toBe(answered + 1);
    expect(beside.quantization).toHaveLength(2);
    expect(beside.quantization).toEqual(here.quantization);
    expect(Buffer.compare(readFileSync(join(dir, 'ext-beside.onnx.data')), readFileSync(join(dir, 'ext-here.onnx.data')))).toBe(0);
  });

  it('a gate naming sqnr gets the figures before the check, on the main thread', () => {
    const src = convBnModel(dir, 4, 32);
    setQuantBesideMinBytes(0);
    const before = quantThreadsStarted();
    const passes = foldFile(src, join(dir, 'sqnr-pass.onnx'), { gate: 'maxRel <= 1e-3 and sqnr >= 0' });
    expect(passes.check?.status).toBe('passed');
    const fails = foldFile(src, join(dir, 'sqnr-fail.onnx'), { gate: 'maxRel <= 1e-3 and sqnr >= 1000' });
    expect(fails.check?.status).toBe('failed');
    // every figure of the output passes: the problem names the model-wide figure the gate failed on (it blamed
    // the output alone, in JUnit and Markdown too)
    expect(fails.check!.outputs[0]!.problem).toMatch(/fails the gate 'maxRel <= 1e-3 and sqnr >= 1000' \(with the model-wide sqnr = -?[\d.e+-]+\)$/);
    expect(foldText(fails)).toMatch(/\n\s+output '.+' fails the gate .*\(with the model-wide sqnr = /);
    expect(quantThreadsStarted()).toBe(before);
    expect(passes.quantization).toHaveLength(2);
  });

  it('half-precision storage keeps the report on the main thread (it judges the folded float32 weights)', () => {
    const src = convBnModel(dir, 5, 32);
    setQuantBesideMinBytes(0);
    const before = quantThreadsStarted();
    const half = foldFile(src, join(dir, 'half.onnx'), { store: 'float16' });
    expect(quantThreadsStarted()).toBe(before);
    setQuantBesideMinBytes(Infinity);
    const plain = foldFile(src, join(dir, 'plain.onnx'));
    expect(half.quantization).toEqual(plain.quantization);
  });
});
