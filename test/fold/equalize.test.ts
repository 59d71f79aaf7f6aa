// Cross-layer equalization (fold --equalize). The scale rule s_i = sqrt(r1_i * r2_i) / r2_i and the requirement
// that the activation be positively homogeneous come from Nagel et al. 2019, "Data-Free Quantization Through
// Weight Equalization and Bias Correction", arXiv:1906.04721, section 4.1. Outside checks: onnxruntime-node
// (graph optimizations disabled) runs the original and the equalized model, and the ONNX checker (Debian
// python3-onnx) reads the written file.
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { f, GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { maxDiff, runOrt } from '../helpers/ort.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';
import { compare } from '../../src/index.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-equalize-'));
const hasChecker = checkerAvailable();

/**
 * conv1 -> BN (scales spanning 10^3) -> act -> conv2 -> act2 -> conv3: after the fold conv1's output channels
 * span a thousand-fold range, the case equalization is for. Invented data for this test.
 */
function chainModel(seed: number, act: 'Relu' | 'Clip' | 'LeakyRelu' | 'PRelu' | 'Abs', channels = 8): string {
  const r = rng(seed);
  const C = channels;
  const g = new GraphBuilder();
  g.input('x', [1, 3, 6, 6]).output('y', [1, 4, 6, 6]);
  g.init('w1', [C, 3, 1, 1], randn(r, C * 3, 0.5));
  g.init('b1', [C], randn(r, C, 0.1));
  g.node('Conv', ['x', 'w1', 'b1'], {}, { name: 'conv1', outputs: ['c1'] });
  // BN scale gamma / sqrt(var + eps) spanning 10^-1.5 .. 10^1.5 across channels
  const gamma = Float32Array.from({ length: C }, (_, i) => 10 ** (-1.5 + (3 * i) / (C - 1)));
  g.init('g', [C], gamma); g.init('be', [C], randn(r, C, 0.2)); g.init('mu', [C], randn(r, C, 0.1)); g.init('va', [C], uniform(r, C, 0.5, 1.5));
  g.node('BatchNormalization', ['c1', 'g', 'be', 'mu', 'va'], {}, { name: 'bn1', outputs: ['n1'] });
  const activation = (input: string, name: string, out: string) => {
    if (act === 'Clip') {
      g.init(`${name}_lo`, [], [0]); g.init(`${name}_hi`, [], [6]);
      g.node('Clip', [input, `${name}_lo`, `${name}_hi`], {}, { name, outputs: [out] });
    } else if (act === 'PRelu') {
      g.init(`${name}_slope`, [C, 1, 1], uniform(r, C, 0.05, 0.3));
      g.node('PRelu', [input, `${name}_slope`], {}, { name, outputs: [out] });
    } else {
      g.node(act, [input], act === 'LeakyRelu' ? { alpha: f(0.1) } : {}, { name, outputs: [out] });
    }
  };
  activation('n1', 'act1', 'a1');
  g.init('w2', [C, C, 1, 1], randn(r, C * C, 0.4));
  g.init('b2', [C], randn(r, C, 0.1));
  g.node('Conv', ['a1', 'w2', 'b2'], {}, { name: 'conv2', outputs: ['c2'] });
  activation('c2', 'act2', 'a2');
  g.init('w3', [4, C, 1, 1], randn(r, 4 * C, 0.4));
  g.node('Conv', ['a2', 'w3'], {}, { name: 'conv3', outputs: ['y'] });
  const path = join(dir, `chain-${act}-${seed}.onnx`);
  writeFileSync(path, modelBytes(g));
  return path;
}

async function agree(a: string, b: string, seed: number): Promise<{ maxAbs: number; scale: number }> {
  const x = Float32Array.from(randn(rng(seed), 108, 1));
  const ya = await runOrt(a, { x: { dims: [1, 3, 6, 6], data: x } });
  const yb = await runOrt(b, { x: { dims: [1, 3, 6, 6], data: x } });
  return maxDiff(yb.y!.data, ya.y!.data);
}

describe('fold --equalize', () => {
  for (const seed of [1, 2, 3]) {
    it(`seed ${seed}: a BN with scales spanning 10^3 then Relu: the folded layer's worst channel gains >= 15 dB`, async () => {
      const src = chainModel(seed, 'Relu');
      const plain = foldFile(src, join(dir, `plain-${seed}.onnx`), { probes: 2 });
      const eq = foldFile(src, join(dir, `eq-${seed}.onnx`), { probes: 2, equalize: true });
      expect(eq.failed).toBe(false);
      expect(eq.check?.passed).toBe(true);
      const worst = (r: typeof plain) => r.quantization.find((q) => q.target === 'conv1')!.sqnrAfter.worstChannel;
      const gain = worst(eq) - worst(plain);
      if (process.env.PLEAT_FIGURES) console.log(`seed ${seed}: conv1 worst channel ${worst(plain).toFixed(1)} -> ${worst(eq).toFixed(1)} dB`);
      // measured (seeds 1, 2, 3): conv1's worst channel under one per-tensor scale 0.0 -> 21.3, 19.6, 15.4 dB (the
      // narrowest channel is rounded to nothing after the plain fold); PLEAT_FIGURES=1 prints them
      expect(gain).toBeGreaterThanOrEqual(15);
      const pairs = eq.equalized.filter((p) => p.status === 'equalized').map((p) => `${p.first}->${p.second}`);
      expect(pairs).toEqual(['conv1->conv2', 'conv2->conv3']);
      const p1 = eq.equalized[0]!;
      expect(p1.through).toEqual(['act1']);
      expect(p1.sqnr!.firstAfter.worstChannel).toBeGreaterThan(p1.sqnr!.firstBefore.worstChannel + 15);
      // the same function: onnxruntime-node on the original and the written model, float32 gate scale
      const d = await agree(src, eq.output!, seed);
      expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * Math.max(1, d.scale));
      // and pleat's own compare of the original with the written model passes its default float32 gate
      expect(compare(src, eq.output!, { probes: 2 }).passed).toBe(true);
      if (hasChecker) expect(onnxCheck(eq.output!)).toBe('');
    });
  }

  it('LeakyRelu and PRelu with non-negative slopes, and Abs (|s x| = s |x|), are homogeneous: equalized and proven', async () => {
    for (const act of ['LeakyRelu', 'PRelu', 'Abs'] as const) {
      const src = chainModel(7, act);
      const r = foldFile(src, join(dir, `eq-${act}.onnx`), { probes: 2, equalize: true });
      expect(r.equalized.map((p) => p.status), act).toEqual(['equalized', 'equalized']);
      const d = await agree(src, r.output!, 7);
      expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * Math.max(1, d.scale));
    }
  });

  it('a Clip with finite bounds (Relu6) is refused with its reason, and nothing changes', () => {
    const src = chainModel(4, 'Clip');
    const plain = foldFile(src, join(dir, 'plain-clip.onnx'), { probes: 1 });
    const r = foldFile(src, join(dir, 'eq-clip.onnx'), { probes: 1, equalize: true });
    expect(r.equalized).toHaveLength(2);
    for (const p of r.equalized) {
      expect(p.status).toBe('refused');
      expect(p.reason).toBe('activation-not-homogeneous');
      expect(p.hint).toMatch(/Clip\) has finite bounds/);
    }
    expect(r.quantization.map((q) => q.sqnrAfter)).toEqual(plain.quantization.map((q) => q.sqnrAfter));
  });

  it('a layer whose output has a second reader is not a pair', () => {
    const r = rng(11);
    const g = new GraphBuilder();
    g.input('x', [1, 2, 4, 4]).output('y', [1, 2, 4, 4]).output('side', [1, 2, 4, 4]);
    g.init('w1', [2, 2, 1, 1], randn(r, 4, 1)); g.node('Conv', ['x', 'w1'], {}, { name: 'conv1', outputs: ['c1'] });
    g.node('Relu', ['c1'], {}, { name: 'relu', outputs: ['side'] });
    g.init('w2', [2, 2, 1, 1], randn(r, 4, 1)); g.node('Conv', ['side', 'w2'], {}, { name: 'conv2', outputs: ['y'] });
    const src = join(dir, 'shared.onnx');
    writeFileSync(src, modelBytes(g));
    const rep = foldFile(src, join(dir, 'shared-eq.onnx'), { probes: 1, equalize: true });
    expect(rep.equalized).toEqual([]);
  });

  it('without --equalize nothing is equalized and the bytes are those of a plain fold', () => {
    const src = chainModel(5, 'Relu');
    const r = foldFile(src, join(dir, 'none.onnx'), { probes: 1 });
    expect(r.equalized).toEqual([]);
  });
});

/** A MobileNetV2-style stack (invented weights): stem 3x3 -> depthwise 3x3 -> pointwise 1x1 (linear) -> 1x1 -> head. */
function mobileModel(seed: number, six: boolean): string {
  const r = rng(seed);
  const g = new GraphBuilder();
  g.input('x', [1, 3, 8, 8]).output('y', [1, 5]);
  const bn = (input: string, name: string, c: number) => {
    g.init(`${name}_g`, [c], uniform(r, c, 0.05, 3)); g.init(`${name}_b`, [c], randn(r, c, 0.2));
    g.init(`${name}_m`, [c], randn(r, c, 0.1)); g.init(`${name}_v`, [c], uniform(r, c, 0.2, 2));
    return g.node('BatchNormalization', [input, `${name}_g`, `${name}_b`, `${name}_m`, `${name}_v`], {}, { name, outputs: [`${name}_y`] });
  };
  const act = (input: string, name: string) => {
    if (!six) return g.node('Relu', [input], {}, { name, outputs: [`${name}_y`] });
    g.init(`${name}_lo`, [], [0]); g.init(`${name}_hi`, [], [6]);
    return g.node('Clip', [input, `${name}_lo`, `${name}_hi`], {}, { name, outputs: [`${name}_y`] });
  };
  const conv = (input: string, name: string, cin: number, cout: number, k: number, group = 1) => {
    g.init(`${name}_w`, [cout, cin / group, k, k], randn(r, cout * (cin / group) * k * k, 0.4));
    const pads = (k - 1) / 2;
    return g.node('Conv', [input, `${name}_w`], { pads: [pads, pads, pads, pads], group }, { name, outputs: [`${name}_y`] });
  };
  let v = act(bn(conv('x', 'stem', 3, 16, 3), 'stem_bn', 16), 'stem_act');
  v = act(bn(conv(v, 'dw', 16, 16, 3, 16), 'dw_bn', 16), 'dw_act');
  v = bn(conv(v, 'pw', 16, 8, 1), 'pw_bn', 8);
  v = act(bn(conv(v, 'expand', 8, 24, 1), 'expand_bn', 24), 'expand_act');
  v = g.node('GlobalAveragePool', [v], {}, { name: 'gap', outputs: ['gap_y'] });
  v = g.node('Flatten', [v], {}, { name: 'flat', outputs: ['flat_y'] });
  g.init('fc_w', [24, 5], randn(r, 120, 0.3)); g.init('fc_b', [5], randn(r, 5, 0.1));
  g.node('Gemm', [v, 'fc_w', 'fc_b'], {}, { name: 'fc', outputs: ['y'] });
  const path = join(dir, `mobile-${six ? 'relu6' : 'relu'}-${seed}.onnx`);
  writeFileSync(path, modelBytes(g));
  return path;
}

describe('fold --equalize on a MobileNetV2-style model', () => {
  it('Relu6 (Clip 0..6): every pair through a Clip is refused with its reason; the linear bottleneck pair is equalized', () => {
    const r = foldFile(mobileModel(3, true), join(dir, 'mobile6.onnx'), { probes: 1, equalize: true });
    const byPair = Object.fromEntries(r.equalized.map((p) => [`${p.first}->${p.second}`, p]));
    expect(Object.keys(byPair).sort()).toEqual(['dw->pw', 'pw->expand', 'stem->dw']);
    for (const k of ['stem->dw', 'dw->pw']) {
      expect(byPair[k]!.status).toBe('refused');
      expect(byPair[k]!.reason).toBe('activation-not-homogeneous');
    }
    expect(byPair['pw->expand']!.status).toBe('equalized');
    expect(byPair['pw->expand']!.through).toEqual([]);
    expect(r.check?.passed).toBe(true);
  });

  it('Relu: every eligible pair is equalized and proven; onnxruntime-node agrees with the original', async () => {
    const src = mobileModel(3, false);
    const r = foldFile(src, join(dir, 'mobile.onnx'), { probes: 2, equalize: true });
    expect(r.equalized.map((p) => `${p.first}->${p.second}:${p.status}`).sort()).toEqual(['dw->pw:equalized', 'pw->expand:equalized', 'stem->dw:equalized']);
    expect(r.check?.passed).toBe(true);
    const x = Float32Array.from(randn(rng(5), 192, 1));
    const a = await runOrt(src, { x: { dims: [1, 3, 8, 8], data: x } });
    const b = await runOrt(r.output!, { x: { dims: [1, 3, 8, 8], data: x } });
    const d = maxDiff(b.y!.data, a.y!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * Math.max(1, d.scale));
    if (hasChecker) expect(onnxCheck(r.output!)).toBe('');
  });
});
