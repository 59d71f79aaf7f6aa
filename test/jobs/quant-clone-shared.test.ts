// Quantization readiness of a layer folded through a --clone-shared copy. A Conv whose output feeds both a
// BatchNormalization (output A) and, directly, output B gets a copy for the norm: the copy's weights are scaled,
// the original keeps its weights for B. The "after" figures must then describe the copy's weights as written to
// disk, not the untouched original's, and the row must say which layer they are for.
//
// Expected figures are worked out here, not by pleat's code:
// - the folded weights read back from the written file with onnx-proto's own decoder, and checked against the
//   BatchNormalization formula y = scale * (x - mean) / sqrt(var + epsilon) + B (ONNX operator documentation,
//   BatchNormalization): each output channel c of the weight times scale[c] / sqrt(var[c] + epsilon);
// - symmetric 8-bit quantize-dequantize as the ONNX QuantizeLinear/DequantizeLinear documentation defines it
//   (y = saturate(round(x / y_scale)), round half to even, int8 range [-128, 127], zero point 0), with the scale
//   max|w| / 127 (common practice for symmetric weight quantization, no single source) in float32, per tensor and
//   per output channel; SQNR = 10 log10(sum w^2 / sum (w - q(w))^2) (Nagel et al. 2019, arXiv:1906.04721, use
//   it to judge per-tensor scales); spread = widest / median per-channel range (max - min), pleat's own figure
//   (README, "Quantization readiness").
// Invented models in our own scenario (a parcel-label reader whose raw feature map is also exported).
import { afterEach, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { quantThreadsAnswered, setQuantBesideMinBytes } from '../../src/jobs/quant-beside.js';
import { foldText } from '../../src/report/ledger-text.js';
import { foldMarkdown } from '../../src/report/markdown.js';
import { pleat } from '../helpers/cli.js';
import { schemaValidator } from '../report/helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-quant-clone-'));
const DEFAULT_MIN = 64 * 1024 * 1024;
const EPS = 1e-5; // BatchNormalization's default epsilon (ONNX operator documentation)
const COUT = 6, CIN = 3, K = 3, PER = CIN * K * K;

// ---- the expected figures, computed here ----

const f32 = Math.fround;

/** Round half to even, written from its definition (the ONNX QuantizeLinear rounding). */
function roundEven(x: number): number {
  const lo = Math.floor(x), d = x - lo;
  if (d < 0.5) return lo;
  if (d > 0.5) return lo + 1;
  return lo % 2 === 0 ? lo : lo + 1;
}

/** QuantizeLinear then DequantizeLinear, int8, zero point 0, float32 arithmetic. */
function qdq(x: number, scale: number): number {
  if (scale === 0) return 0;
  const q = Math.min(127, Math.max(-128, roundEven(f32(x / scale))));
  return f32(q * scale);
}

const scaleOf = (maxAbs: number) => f32(f32(maxAbs) / 127);
const db = (signal: number, noise: number) => (noise === 0 ? Infinity : 10 * Math.log10(signal / noise));

interface Figures { spread: number; tensor: number; channel: number; worstChannel: number }

/** Figures of a Conv weight [Cout, Cin, k, k] (output channel c = the c-th run of PER values). */
function expectedFigures(w: ArrayLike<number>): Figures {
  const chan = (c: number) => Array.from({ length: PER }, (_, i) => w[c * PER + i]!);
  const ranges: number[] = [], maxAbs: number[] = [];
  for (let c = 0; c < COUT; c++) {
    const v = chan(c);
    ranges.push(Math.max(...v) - Math.min(...v));
    maxAbs.push(Math.max(...v.map(Math.abs)));
  }
  const sorted = [...ranges].sort((a, b) => a - b);
  const median = (sorted[COUT / 2 - 1]! + sorted[COUT / 2]!) / 2; // COUT is even
  const sT = scaleOf(Math.max(...maxAbs));
  let signal = 0, noiseT = 0, noiseC = 0, worst = Infinity;
  for (let c = 0; c < COUT; c++) {
    const sC = scaleOf(maxAbs[c]!);
    let sig = 0, nT = 0;
    for (const x of chan(c)) {
      sig += x * x;
      nT += (x - qdq(x, sT)) ** 2;
      noiseC += (x - qdq(x, sC)) ** 2;
    }
    signal += sig; noiseT += nT;
    if (sig > 0) worst = Math.min(worst, db(sig, nT));
  }
  return { spread: sorted[COUT - 1]! / median, tensor: db(signal, noiseT), channel: db(signal, noiseC), worstChannel: worst };
}

/** A row's figures against the expected ones (sums in another order: equal to far below the 0.1 dB shown). */
function expectFigures(spread: number, sqnr: { tensor: number; channel: number; worstChannel: number }, want: Figures): void {
  expect(spread).toBeCloseTo(want.spread, 9);
  expect(sqnr.tensor).toBeCloseTo(want.tensor, 9);
  expect(sqnr.channel).toBeCloseTo(want.channel, 9);
  expect(sqnr.worstChannel).toBeCloseTo(want.worstChannel, 9);
}

// ---- the model ----

interface Bn { name: string; out: string; scale: Float32Array; bias: Float32Array; mean: Float32Array; var: Float32Array }

const weights = randn(rng(71), COUT * PER, 0.4);

/** Running variances spread over five decades: the fold widens channel 0 some 300-fold against channel 5. */
function bnParams(name: string, out: string, seed: number): Bn {
  const r = rng(seed);
  return {
    name, out, scale: uniform(r, COUT, 0.8, 1.2), bias: randn(r, COUT, 0.1), mean: randn(r, COUT, 0.2),
    var: Float32Array.from([1e-3, 0.05, 0.5, 2, 10, 90]),
  };
}

/** conv (x) -> graph output B, read also by each BatchNormalization in `bns` (each a graph output of its own). */
function sharedModel(file: string, bns: Bn[]): string {
  const g = new GraphBuilder();
  g.input('x', [1, CIN, 6, 6]).output('B', [1, COUT, 6, 6]);
  g.init('w', [COUT, CIN, K, K], weights);
  g.node('Conv', ['x', 'w'], { pads: [1, 1, 1, 1] }, { name: 'conv', outputs: ['B'] });
  for (const b of bns) {
    g.output(b.out, [1, COUT, 6, 6]);
    const p = (k: string, v: Float32Array) => g.init(`${b.name}_${k}`, [COUT], v);
    g.node('BatchNormalization', ['B', p('scale', b.scale), p('bias', b.bias), p('mean', b.mean), p('var', b.var)], {}, { name: b.name, outputs: [b.out] });
  }
  const path = join(dir, file);
  writeFileSync(path, modelBytes(g));
  return path;
}

/** The weight the node writing `output` reads, from the written file (onnx-proto's decoder), with the node's name. */
function shippedWeight(file: string, output: string): { node: string; w: Float32Array } {
  const m = onnxProto.onnx.ModelProto.decode(readFileSync(file));
  const n = m.graph!.node!.find((x) => x.output!.includes(output))!;
  const t = m.graph!.initializer!.find((x) => x.name === n.input![1])!;
  expect(t.dataType).toBe(1); // FLOAT
  const raw = t.rawData!;
  const bytes = Uint8Array.from(raw); // (own buffer, aligned)
  return { node: n.name!, w: new Float32Array(bytes.buffer, 0, bytes.byteLength / 4) };
}

/** The shipped weights are the BatchNormalization formula's (float32 rounding of each product). */
function expectFoldedByFormula(w: Float32Array, b: Bn): void {
  for (let c = 0; c < COUT; c++) {
    const s = b.scale[c]! / Math.sqrt(b.var[c]! + EPS);
    for (let i = 0; i < PER; i++) {
      const want = weights[c * PER + i]! * s;
      expect(Math.abs(w[c * PER + i]! - want)).toBeLessThanOrEqual(2 ** -22 * Math.abs(want));
    }
  }
}

afterEach(() => setQuantBesideMinBytes(DEFAULT_MIN));

describe('--clone-shared: quantization readiness describes the copy that was folded', { timeout: 120_000 }, () => {
  const bnA = bnParams('bn_a', 'A', 72);
  const original = expectedFigures(weights);

  it('one copy: the after figures are the copy\'s shipped weights, the row names the copy; main thread and worker agree', () => {
    const src = sharedModel('one.onnx', [bnA]);
    setQuantBesideMinBytes(Infinity);
    const out = join(dir, 'one.out.onnx');
    const r = foldFile(src, out, { cloneShared: true });
    const entry = r.normalizations.find((e) => e.node === 'bn_a')!;
    expect([entry.status, entry.target, entry.copy]).toEqual(['folded', 'conv', 'conv.clone']);

    // what ships: the original keeps its weights (output B), the copy holds the folded ones (output A)
    const kept = shippedWeight(out, 'B'), copy = shippedWeight(out, 'A');
    expect(kept.node).toBe('conv');
    expect(Array.from(kept.w)).toEqual(Array.from(weights));
    expect(copy.node).toBe('conv.clone');
    expectFoldedByFormula(copy.w, bnA);
    const after = expectedFigures(copy.w);
    // the fold changes the figures a great deal here: a row with equal before and after figures is wrong
    expect(after.spread / original.spread).toBeGreaterThan(10);
    expect(original.worstChannel - after.worstChannel).toBeGreaterThan(20);

    expect(r.quantization).toHaveLength(1);
    const row = r.quantization[0]!;
    expect([row.target, row.copy, row.norms, row.channels]).toEqual(['conv', 'conv.clone', ['bn_a'], COUT]);
    expectFigures(row.spreadBefore, row.sqnrBefore, original);
    expectFigures(row.spreadAfter, row.sqnrAfter, after);
    // flagged: the fold brought the worst channel below 20 dB and below where it was
    expect(after.worstChannel).toBeLessThan(20);
    expect(row.flagged).toBe(true);

    // the worker that reads the written file back gives the same rows
    setQuantBesideMinBytes(0);
    const answered = quantThreadsAnswered();
    const beside = foldFile(src, join(dir, 'one.beside.onnx'), { cloneShared: true });
    expect(quantThreadsAnswered()).toBe(answered + 1);
    expect(beside.quantization).toEqual(r.quantization);

    // the text ledger and Markdown say whose weights the after figures are
    const line = foldText(r).split('\n').find((l) => l.includes(' channels  spread '))!;
    expect(line).toMatch(/^\s+conv -> copy conv\.clone\s+6 channels\s+spread /);
    expect(line).toContain(`spread ${original.spread.toFixed(1)} -> ${after.spread.toFixed(1)}`);
    expect(line).toContain(`worst channel ${original.worstChannel.toFixed(1)} -> ${after.worstChannel.toFixed(1)}`);
    expect(foldMarkdown(r)).toContain('`conv` → copy `conv.clone` worst channel');
  });

  it('a gate naming sqnr judges the copy\'s figures: the fold starves a channel of the copy, so sqnr >= 20 fails', () => {
    const src = sharedModel('gate.onnx', [bnA]);
    const r = foldFile(src, join(dir, 'gate.out.onnx'), { cloneShared: true, gate: 'maxRel <= 1e-3 and sqnr >= 20' });
    // the lowest worst-channel figure is the copy's (the untouched original keeps some 40 dB in every channel)
    expect(original.worstChannel).toBeGreaterThan(20);
    expect(r.quantization[0]!.sqnrAfter.worstChannel).toBeLessThan(20);
    expect(r.check?.status).toBe('failed');
    expect(r.failed).toBe(true);
  });

  it('--store float16: the figures of the copy\'s folded float32 weights, as without it', () => {
    const src = sharedModel('half.onnx', [bnA]);
    const plain = foldFile(src, join(dir, 'half.plain.onnx'), { cloneShared: true });
    const half = foldFile(src, join(dir, 'half.out.onnx'), { cloneShared: true, store: 'float16' });
    expect(half.storage?.tensorsConverted).toBeGreaterThan(0);
    expect(half.quantization).toEqual(plain.quantization);
    expect(half.quantization[0]!.copy).toBe('conv.clone');
    expectFigures(half.quantization[0]!.spreadAfter, half.quantization[0]!.sqnrAfter, expectedFigures(shippedWeight(join(dir, 'half.plain.onnx'), 'A').w));
  });

  it('two norms on one shared output: two copies, one row each with its own copy\'s figures', () => {
    const bnC = { ...bnParams('bn_c', 'C', 73), var: Float32Array.from([40, 3, 1, 0.2, 0.02, 4e-3]) };
    const out = join(dir, 'two.out.onnx');
    setQuantBesideMinBytes(Infinity);
    const r = foldFile(sharedModel('two.onnx', [bnA, bnC]), out, { cloneShared: true });
    const copyA = shippedWeight(out, 'A'), copyC = shippedWeight(out, 'C');
    expectFoldedByFormula(copyA.w, bnA);
    expectFoldedByFormula(copyC.w, bnC);
    expect(new Set([copyA.node, copyC.node]).size).toBe(2);
    expect(r.normalizations.map((e) => [e.node, e.copy])).toEqual([['bn_a', copyA.node], ['bn_c', copyC.node]]);
    expect(r.quantization.map((q) => [q.target, q.copy, q.norms])).toEqual([['conv', copyA.node, ['bn_a']], ['conv', copyC.node, ['bn_c']]]);
    for (const [q, copy] of [[r.quantization[0]!, copyA], [r.quantization[1]!, copyC]] as const) {
      expectFigures(q.spreadBefore, q.sqnrBefore, original);
      expectFigures(q.spreadAfter, q.sqnrAfter, expectedFigures(copy.w));
    }
  });

  it('the CLI: the JSON report carries the copy and its figures (schema-valid), the text ledger names it', () => {
    const src = sharedModel('cli.onnx', [bnA]);
    const json = join(dir, 'cli.json');
    const out = join(dir, 'cli.out.onnx');
    const res = pleat(['fold', src, '-o', out, '--clone-shared', '--report', `json:${json}`]);
    expect(res.code, res.stderr).toBe(0);
    const report = JSON.parse(readFileSync(json, 'utf8'));
    const validate = schemaValidator();
    expect(validate(report), JSON.stringify(validate.errors)).toBe(true);
    expect(report.normalizations[0].copy).toBe('conv.clone');
    const row = report.quantization[0];
    expect([row.target, row.copy]).toEqual(['conv', 'conv.clone']);
    const after = expectedFigures(shippedWeight(out, 'A').w);
    expectFigures(row.spreadAfter, row.sqnrAfter, after);
    expectFigures(row.spreadBefore, row.sqnrBefore, original);
    expect(res.stdout).toMatch(new RegExp(`\\n\\s+conv -> copy conv\\.clone\\s+6 channels\\s+spread ${original.spread.toFixed(1)} -> ${after.spread.toFixed(1)} `));
  });
});
