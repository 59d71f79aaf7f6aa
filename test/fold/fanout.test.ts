// Folding into every reader (issue 12): a normalization read by several linear layers folds into all of them,
// each with its own copy of the scale and its own bias; the learned scale and shift of a LayerNormalization or an
// RMSNorm move into the layers reading it while the statistics stay; --clone-shared copies a shared producer.
// Outside checks (see harness.ts): onnxruntime-node with graph optimizations off agrees within 1e-4 of the output
// scale (the float32 gate), and the ONNX reference checker passes on every written model. Each fold is also proven
// by pleat's own per-fold proof (src/verify/prove.ts), whose region must hold every reader.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, f, modelBytes, randn, rng } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { analyze, type ProofCase } from '../../src/fold/index.js';
import { proveFold } from '../../src/verify/prove.js';
import { bnParams, dir, feedsFor, foldAndCheck, summary } from './harness.js';

const w = (g: GraphBuilder, name: string, dims: number[], seed: number, scale = 0.5) => g.init(name, dims, randn(rng(seed), dims.reduce((a, b) => a * b, 1), scale));
const bn = (g: GraphBuilder, x: string, c: number, name: string, seed: number) =>
  g.node('BatchNormalization', [x, ...bnParams(g, name, c, seed, { nearZeroVar: true })], { epsilon: f(1e-3) }, { name });

/** A prover that records each proof case and runs pleat's per-fold proof on it. */
function recordingProver() {
  const cases: ProofCase[] = [];
  return { cases, prove: (c: ProofCase) => { cases.push(c); return proveFold(c, { seed: 3 }).passed; } };
}

describe('fan-out into several linear readers', () => {
  for (const readers of [2, 3]) {
    it(`a BatchNormalization read by ${readers} unpadded 1x1 convs folds into all of them`, async () => {
      const g = new GraphBuilder();
      g.input('x', [2, 4, 5, 5]);
      const r = g.node('Relu', ['x'], {}, { name: 'relu' }); // no linear producer: the norm can only go forward
      const b = bn(g, r, 4, 'bn', 1);
      for (let i = 0; i < readers; i++) {
        g.output(`y${i}`, [2, 3, 5, 5]);
        const ins = [b, w(g, `w${i}`, [3, 4, 1, 1], 10 + i)];
        if (i === 1) ins.push(w(g, `b${i}`, [3], 20 + i)); // one reader with a bias, the others without
        g.node('Conv', ins, {}, { name: `pw${i}`, outputs: [`y${i}`] });
      }
      const p = recordingProver();
      const res = await foldAndCheck(g, feedsFor({ x: [2, 4, 5, 5] }), { prove: p.prove });
      const names = Array.from({ length: readers }, (_, i) => `pw${i}`);
      expect(summary(res.ledger)).toEqual([`bn:folded:into-consumer:${names.join(', ')}`]);
      expect(res.ledger.normalizations[0]!.targets).toEqual(names);
      expect(res.ledger.normalizations[0]!.effect).toMatch(/each with its own copy of the scale/);
      const m = parseModel(res.after, dir);
      expect(m.graph.nodes.map((n) => n.opType)).toEqual(['Relu', ...names.map(() => 'Conv')]);
      // the proof region holds every reader
      expect(p.cases).toHaveLength(1);
      expect(p.cases[0]!.before.outputs.map((o) => o.name).sort()).toEqual(names.map((_, i) => `y${i}`));
      expect(p.cases[0]!.before.nodes.map((n) => n.name).sort()).toEqual(['bn', ...names]);
    });
  }

  for (const seed of [1, 2, 3]) {
    it(`seeded: a norm read by 2-4 unpadded convs of random kernel, group and bias (seed ${seed})`, async () => {
      const r = rng(seed);
      const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
      const c = 2 * pick(1, 3), n = pick(2, 4);
      const g = new GraphBuilder();
      g.input('x', [1, c, 6, 6]);
      // a per-channel Mul then Add by constant vectors (a run of two steps), after a non-linear op
      const act = g.node('Relu', ['x'], {}, { name: 'relu' });
      const m = g.node('Mul', [act, g.init('s', [c, 1, 1], randn(r, c, 0.5, 1))], {}, { name: 'scale' });
      const b = g.node('Add', [m, g.init('t', [c, 1, 1], randn(r, c, 0.5))], {}, { name: 'shift' });
      const names: string[] = [];
      for (let i = 0; i < n; i++) {
        const k = pick(1, 5), group = pick(0, 1) ? 2 : 1, cout = 2 * pick(1, 3);
        const ins = [b, w(g, `w${i}`, [cout, c / group, k, k], 50 + 10 * seed + i)];
        if (pick(0, 1)) ins.push(w(g, `b${i}`, [cout], 90 + 10 * seed + i));
        g.node('Conv', ins, { group }, { name: `c${i}`, outputs: [`y${i}`] });
        g.output(`y${i}`, [1, cout, 7 - k, 7 - k]);
        names.push(`c${i}`);
      }
      const res = await foldAndCheck(g, feedsFor({ x: [1, c, 6, 6] }, seed), { prove: recordingProver().prove });
      expect(summary(res.ledger)).toEqual(['scale', 'shift'].map((s) => `${s}:folded:into-consumer:${names.join(', ')}`));
      expect(parseModel(res.after, dir).graph.nodes.map((x) => x.opType)).toEqual(['Relu', ...names.map(() => 'Conv')]);
    });
  }

  it('the proof finds one probe shape every reader accepts (a 1x1 reader first, a 5x5 one after)', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4, 7, 7]).output('y0', [1, 2, 7, 7]).output('y1', [1, 2, 3, 3]);
    const b = bn(g, g.node('Relu', ['x'], {}, { name: 'relu' }), 4, 'bn', 12);
    g.node('Conv', [b, w(g, 'w0', [2, 4, 1, 1], 13)], {}, { name: 'small', outputs: ['y0'] });
    g.node('Conv', [b, w(g, 'w1', [2, 4, 5, 5], 14)], {}, { name: 'large', outputs: ['y1'] });
    const p = recordingProver();
    const res = await foldAndCheck(g, feedsFor({ x: [1, 4, 7, 7] }), { prove: p.prove });
    expect(summary(res.ledger)).toEqual(['bn:folded:into-consumer:small, large']);
  });

  it('a padded reader keeps the norm, and the reason names it', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4, 5, 5]).output('y0', [1, 3, 5, 5]).output('y1', [1, 3, 5, 5]);
    const b = bn(g, g.node('Relu', ['x'], {}, { name: 'relu' }), 4, 'bn', 2);
    g.node('Conv', [b, w(g, 'w0', [3, 4, 1, 1], 3)], {}, { name: 'plain', outputs: ['y0'] });
    g.node('Conv', [b, w(g, 'w1', [3, 4, 3, 3], 4)], { pads: [1, 1, 1, 1] }, { name: 'padded', outputs: ['y1'] });
    const res = await foldAndCheck(g, feedsFor({ x: [1, 4, 5, 5] }));
    expect(summary(res.ledger)).toEqual(['bn:kept:padded-consumer']);
    expect(res.ledger.normalizations[0]!.target).toBe('padded');
    expect(res.ledger.normalizations[0]!.hint).toMatch(/'padded' pads its input/);
    expect(Buffer.from(res.after).equals(Buffer.from(res.before))).toBe(true);
  });

  it('a non-linear reader or a model output keeps the norm, naming that reader', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4, 3, 3]).output('y0', [1, 3, 3, 3]).output('y1', [1, 4, 3, 3]);
    const b = bn(g, g.node('Relu', ['x'], {}, { name: 'relu' }), 4, 'bn', 5);
    g.node('Conv', [b, w(g, 'w0', [3, 4, 1, 1], 6)], {}, { name: 'pw', outputs: ['y0'] });
    g.node('Sigmoid', [b], {}, { name: 'gate', outputs: ['y1'] });
    const res = await foldAndCheck(g, feedsFor({ x: [1, 4, 3, 3] }));
    expect(summary(res.ledger)).toEqual(['bn:kept:shared-output']);
    expect(res.ledger.normalizations[0]!.hint).toMatch(/^'gate' \(Sigmoid\) also reads its output/);

    const h = new GraphBuilder();
    h.input('x', [1, 4, 3, 3]).output('y0', [1, 3, 3, 3]).output('n', [1, 4, 3, 3]);
    const r = h.node('Relu', ['x'], {}, { name: 'relu' });
    h.node('BatchNormalization', [r, ...bnParams(h, 'bn', 4, 7)], {}, { name: 'bn', outputs: ['n'] });
    h.node('Conv', ['n', w(h, 'w0', [3, 4, 1, 1], 8)], {}, { name: 'pw', outputs: ['y0'] });
    const res2 = await foldAndCheck(h, feedsFor({ x: [1, 4, 3, 3] }));
    expect(summary(res2.ledger)).toEqual(['bn:kept:graph-output']);
  });

  it('a failed proof reverts the fold for every reader', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4, 3, 3]).output('y0', [1, 3, 3, 3]).output('y1', [1, 3, 3, 3]);
    const b = bn(g, g.node('Relu', ['x'], {}, { name: 'relu' }), 4, 'bn', 9);
    g.node('Conv', [b, w(g, 'w0', [3, 4, 1, 1], 10)], {}, { name: 'a', outputs: ['y0'] });
    g.node('Conv', [b, w(g, 'w1', [3, 4, 1, 1], 11)], {}, { name: 'b', outputs: ['y1'] });
    const res = await foldAndCheck(g, feedsFor({ x: [1, 4, 3, 3] }), { prove: () => false, agree: false });
    expect(summary(res.ledger)).toEqual(['bn:kept:proof-failed']);
    expect(Buffer.from(res.after).equals(Buffer.from(res.before))).toBe(true);
  });
});

type NormForm = 'fused' | 'written' | 'rms';

/**
 * A pre-norm transformer block on [B, T, D]: norm -> separate q/k/v projections (MatMul + bias Add) -> one-head
 * attention -> output projection -> residual; norm -> MLP (MatMul + bias, GELU written out with Erf) -> residual.
 */
function preNormBlock(form: NormForm, d = 8, t = 5): GraphBuilder {
  const g = new GraphBuilder();
  g.input('x', [2, t, d]).output('y', [2, t, d]);
  let seed = 100;
  const vec = (name: string, n: number, mean = 0) => g.init(name, [n], randn(rng(seed++), n, 0.5, mean));
  const norm = (x: string, p: string): string => {
    if (form === 'fused') return g.node('LayerNormalization', [x, vec(`${p}.g`, d, 1), vec(`${p}.b`, d)], { axis: -1, epsilon: f(1e-5) }, { name: p });
    if (form === 'written') {
      // (x - mean) / sqrt(mean((x - mean)^2) + eps) * g + b over the last axis, as exporters write it out
      const mu = g.node('ReduceMean', [x], { axes: [-1] }, { name: `${p}.mean` });
      const dd = g.node('Sub', [x, mu], {}, { name: `${p}.sub` });
      const sq = g.node('Pow', [dd, g.init(`${p}.two`, [], [2])], {}, { name: `${p}.pow` });
      const v = g.node('ReduceMean', [sq], { axes: [-1] }, { name: `${p}.var` });
      const ve = g.node('Add', [v, g.init(`${p}.eps`, [], [1e-5])], {}, { name: `${p}.add_eps` });
      const sd = g.node('Sqrt', [ve], {}, { name: `${p}.sqrt` });
      const nn = g.node('Div', [dd, sd], {}, { name: `${p}.div` });
      const sc = g.node('Mul', [nn, vec(`${p}.g`, d, 1)], {}, { name: `${p}.scale` });
      return g.node('Add', [sc, vec(`${p}.b`, d)], {}, { name: `${p}.shift` });
    }
    // RMSNorm (Zhang & Sennrich 2019, arXiv:1910.07467): x * 1/sqrt(mean(x^2) + eps) * w
    const sq = g.node('Pow', [x, g.init(`${p}.two`, [], [2])], {}, { name: `${p}.pow` });
    const ms = g.node('ReduceMean', [sq], { axes: [-1] }, { name: `${p}.mean` });
    const ve = g.node('Add', [ms, g.init(`${p}.eps`, [], [1e-6])], {}, { name: `${p}.add_eps` });
    const rs = g.node('Reciprocal', [g.node('Sqrt', [ve], {}, { name: `${p}.sqrt` })], {}, { name: `${p}.rsqrt` });
    const nn = g.node('Mul', [x, rs], {}, { name: `${p}.norm` });
    return g.node('Mul', [nn, vec(`${p}.w`, d, 1)], {}, { name: `${p}.scale` });
  };
  const linear = (x: string, name: string, k: number, n: number) =>
    g.node('Add', [g.node('MatMul', [x, w(g, `${name}.W`, [k, n], seed++)], {}, { name }), vec(`${name}.bias`, n)], {}, { name: `${name}.add` });
  const h = norm('x', 'ln1');
  const q = linear(h, 'q', d, d), k = linear(h, 'k', d, d), v = linear(h, 'v', d, d);
  const kt = g.node('Transpose', [k], { perm: [0, 2, 1] }, { name: 'kt' });
  const sc = g.node('Mul', [g.node('MatMul', [q, kt], {}, { name: 'qk' }), g.init('inv_sqrt_d', [], [1 / Math.sqrt(d)])], {}, { name: 'scale_scores' });
  const att = g.node('Softmax', [sc], { axis: -1 }, { name: 'softmax' });
  const o = linear(g.node('MatMul', [att, v], {}, { name: 'attend' }), 'o', d, d);
  const r1 = g.node('Add', ['x', o], {}, { name: 'residual1' });
  const h2 = norm(r1, 'ln2');
  const f1 = linear(h2, 'fc1', d, 2 * d);
  // GELU written out: x * (1 + erf(x / sqrt(2))) * 0.5 (its constants are affine steps, not normalizations)
  const e = g.node('Erf', [g.node('Div', [f1, g.init('sqrt2', [], [Math.SQRT2])], {}, { name: 'gelu.div' })], {}, { name: 'gelu.erf' });
  const gl = g.node('Mul', [g.node('Mul', [f1, g.node('Add', [e, g.init('one', [], [1])], {}, { name: 'gelu.add' })], {}, { name: 'gelu.mul' }), g.init('half', [], [0.5])], {}, { name: 'gelu.half' });
  const f2 = linear(gl, 'fc2', 2 * d, d);
  g.node('Add', [r1, f2], {}, { name: 'residual2', outputs: ['y'] });
  return g;
}

describe('pre-norm transformer blocks: the scale and shift move into q/k/v and the MLP, the statistics stay', () => {
  const feeds = feedsFor({ x: [2, 5, 8] }, 31, 2);

  // LayerNormalization's definition: ONNX Operators, LayerNormalization (opset 17): Y = (X - mean) /
  // sqrt(var + epsilon) * Scale + B over the axes from `axis` on, so with unit Scale and no B only the statistics
  // remain and X' W' + b' = X (diag(Scale) W) + (b + B W) gives the same readers' outputs.
  it('fused LayerNormalization (opset 17)', async () => {
    const p = recordingProver();
    const res = await foldAndCheck(preNormBlock('fused'), feeds, { prove: p.prove });
    const norms = res.ledger.normalizations.filter((e) => e.kind === 'normalization');
    expect(norms.map((e) => `${e.node}:${e.status}:${e.targets.join('+')}`)).toEqual(['ln1:folded:q+k+v', 'ln2:folded:fc1']);
    expect(norms[0]!.effect).toMatch(/statistics stay .* scale and shift move into 'q', 'k' and 'v'/);
    const m = parseModel(res.after, dir);
    for (const ln of m.graph.nodes.filter((n) => n.opType === 'LayerNormalization')) {
      expect(ln.inputs.filter((i) => i)).toHaveLength(2); // no B
      const scale = m.graph.initializers.find((t) => t.name === ln.inputs[1])!;
      expect(Array.from(tensorToFloat64(scale))).toEqual(new Array(8).fill(1));
    }
    expect(m.graph.nodes.length).toBe(parseModel(res.before, dir).graph.nodes.length - 1); // gelu.half went into fc2
    // the GELU's 0.5 is an affine step folded into fc2, listed apart from the normalizations
    expect(res.ledger.normalizations.filter((e) => e.kind === 'affine-step').map((e) => `${e.node}:${e.status}:${e.target}`)).toEqual(['gelu.half:folded:fc2']);
    expect(p.cases.find((c) => c.nodes.includes('ln1'))!.before.outputs).toHaveLength(3);
  });

  // Scale and B of shape [1, D] are one value per feature as [D] is (they broadcast the same over [B, T, D]): the
  // evaluator refused them (exit 2) and audit kept the norm as "spans several axes".
  it('fused LayerNormalization whose Scale and B are [1, D] folds as with [D]', async () => {
    const g = new GraphBuilder();
    g.input('x', [2, 5, 8]).output('y', [2, 5, 3]);
    const ln = g.node('LayerNormalization', ['x', g.init('s', [1, 8], randn(rng(41), 8, 0.5, 1)), g.init('b', [1, 8], randn(rng(42), 8, 0.5))],
      { axis: -1, epsilon: f(1e-5) }, { name: 'ln' });
    g.node('MatMul', [ln, w(g, 'W', [8, 3], 43)], {}, { name: 'mm', outputs: ['y'] });
    const res = await foldAndCheck(g, feeds, { prove: recordingProver().prove });
    expect(res.ledger.normalizations.map((e) => `${e.node}:${e.status}:${e.targets.join('+')}`)).toEqual(['ln:folded:mm']);
  });

  it('LayerNorm written out as primitive ops (opset 13): the Mul and Add go, the chain stays', async () => {
    const res = await foldAndCheck(preNormBlock('written'), feeds, { prove: recordingProver().prove }, { opset: 13 });
    const norms = res.ledger.normalizations.filter((e) => e.kind === 'normalization');
    expect(norms.map((e) => `${e.node}:${e.op}:${e.status}:${e.targets.join('+')}`)).toEqual([
      'ln1.div:ReduceMean/Sub/Pow/ReduceMean/Add/Sqrt/Div:folded:q+k+v', 'ln1.scale:Mul:folded:q+k+v', 'ln1.shift:Add:folded:q+k+v',
      'ln2.div:ReduceMean/Sub/Pow/ReduceMean/Add/Sqrt/Div:folded:fc1', 'ln2.scale:Mul:folded:fc1', 'ln2.shift:Add:folded:fc1',
    ]);
    expect(norms[0]!.effect).toMatch(/statistics stay/);
    const left = parseModel(res.after, dir).graph.nodes.map((n) => n.name);
    for (const gone of ['ln1.scale', 'ln1.shift', 'ln2.scale', 'ln2.shift']) expect(left).not.toContain(gone);
    expect(left).toContain('ln1.div');
  });

  it('RMSNorm written out (Zhang & Sennrich 2019, arXiv:1910.07467): its weight moves into q/k/v and fc1', async () => {
    const res = await foldAndCheck(preNormBlock('rms'), feeds, { prove: recordingProver().prove });
    const norms = res.ledger.normalizations.filter((e) => e.kind === 'normalization');
    expect(norms.map((e) => `${e.node}:${e.op}:${e.status}:${e.targets.join('+')}`)).toEqual([
      'ln1.norm:Pow/ReduceMean/Add/Sqrt/Reciprocal/Mul:folded:q+k+v', 'ln1.scale:Mul:folded:q+k+v',
      'ln2.norm:Pow/ReduceMean/Add/Sqrt/Reciprocal/Mul:folded:fc1', 'ln2.scale:Mul:folded:fc1',
    ]);
    expect(parseModel(res.after, dir).graph.nodes.map((n) => n.name)).not.toContain('ln1.scale');
  });

  for (const seed of [1, 2, 3]) {
    it(`seeded: a LayerNormalization on [M, K] read by 2-3 MatMul/Gemm layers of random form (seed ${seed})`, async () => {
      const r = rng(seed);
      const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
      const m = pick(2, 4), k = pick(3, 6), n = pick(2, 3);
      const g = new GraphBuilder();
      g.input('x', [m, k]);
      const ln = g.node('LayerNormalization', ['x', g.init('s', [k], randn(r, k, 0.5, 1)), g.init('b', [k], randn(r, k, 0.5))], { axis: pick(0, 1) ? -1 : 1, epsilon: f(1e-5) }, { name: 'ln' });
      const names: string[] = [];
      for (let i = 0; i < n; i++) {
        const out = pick(2, 5);
        if (pick(0, 1)) {
          g.node('MatMul', [ln, w(g, `w${i}`, [k, out], 200 + 10 * seed + i)], {}, { name: `r${i}`, outputs: [`y${i}`] });
        } else {
          const tb = pick(0, 1);
          const ins = [ln, w(g, `w${i}`, tb ? [out, k] : [k, out], 200 + 10 * seed + i)];
          if (pick(0, 1)) ins.push(w(g, `c${i}`, [out], 300 + 10 * seed + i));
          g.node('Gemm', ins, { transB: tb, alpha: f(0.5 + r()) }, { name: `r${i}`, outputs: [`y${i}`] });
        }
        g.output(`y${i}`, [m, out]);
        names.push(`r${i}`);
      }
      const res = await foldAndCheck(g, feedsFor({ x: [m, k] }, seed, 3), { prove: recordingProver().prove });
      expect(summary(res.ledger)).toEqual([`ln:folded:into-consumer:${names.join(', ')}`]);
    });
  }

  it('a LayerNormalization with no linear reader, or with a neutral tail, stays as runtime-statistics with a reason', () => {
    const g = new GraphBuilder();
    g.input('x', [2, 4]).output('y1', [2, 4]).output('y2', [2, 4]);
    const ln = g.node('LayerNormalization', ['x', w(g, 's', [4], 1), w(g, 'b', [4], 2)], { axis: -1 }, { name: 'ln' });
    g.node('Softmax', [ln], { axis: -1 }, { name: 'sm', outputs: ['y1'] });
    const ln2 = g.node('LayerNormalization', ['x', g.init('ones', [4], [1, 1, 1, 1])], { axis: -1 }, { name: 'ln_unit' });
    g.node('MatMul', [ln2, w(g, 'mw', [4, 4], 3)], {}, { name: 'proj', outputs: ['y2'] });
    const found = analyze(parseModel(modelBytes(g), dir));
    expect(found.map((x) => `${x.node}:${x.status}:${x.reason}`)).toEqual(['ln:kept:runtime-statistics', 'ln_unit:kept:runtime-statistics']);
    expect(found[0]!.hint).toMatch(/scale and shift have nowhere to move: no Conv, Gemm or MatMul with constant weights reads its output/);
    expect(found[1]!.hint).toMatch(/Scale is all ones and it has no shift, so nothing is left to move/);
  });

  it('a LayerNormalization read on another axis than the one it scales is refused with axis-mismatch', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4, 3, 4]).output('y', [1, 2, 3, 4]);
    // LayerNormalization over the last axis (W = 4), read by a 1x1 Conv contracting the channel axis (C = 4)
    const ln = g.node('LayerNormalization', ['x', w(g, 's', [4], 1), w(g, 'b', [4], 2)], { axis: -1 }, { name: 'ln' });
    g.node('Conv', [ln, w(g, 'cw', [2, 4, 1, 1], 3)], {}, { name: 'pw', outputs: ['y'] });
    const res = await foldAndCheck(g, feedsFor({ x: [1, 4, 3, 4] }));
    expect(summary(res.ledger)).toEqual(['ln:kept:axis-mismatch']);
    expect(res.ledger.normalizations[0]!.hint).toMatch(/scales the last axis but the layer's channel axis is 1/);
  });
});

describe('--clone-shared', () => {
  // A conv whose output feeds a BatchNormalization and a residual Add.
  const build = () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4, 5, 5]).output('y', [1, 4, 5, 5]);
    const c = g.node('Conv', ['x', w(g, 'cw', [4, 4, 3, 3], 1), w(g, 'cb', [4], 2)], { pads: [1, 1, 1, 1] }, { name: 'conv' });
    const b = bn(g, c, 4, 'bn', 3);
    const r = g.node('Relu', [b], {}, { name: 'relu' });
    g.node('Add', [r, c], {}, { name: 'residual', outputs: ['y'] });
    return g;
  };
  const feeds = feedsFor({ x: [1, 4, 5, 5] });

  it('without it the norm is kept, and the hint names the other reader and the flag', async () => {
    const res = await foldAndCheck(build(), feeds);
    expect(summary(res.ledger)).toEqual(['bn:kept:shared-output']);
    expect(res.ledger.normalizations[0]!.hint).toMatch(/also read by 'residual' \(Add\).*--clone-shared/);
  });

  it('with it the norm folds into a copy of the conv, the residual keeps the original, and the cost is listed', async () => {
    const p = recordingProver();
    const res = await foldAndCheck(build(), feeds, { cloneShared: true, prove: p.prove });
    expect(summary(res.ledger)).toEqual(['bn:folded:into-producer:conv']);
    const e = res.ledger.normalizations[0]!;
    expect(e.cloneBytes).toBe((4 * 4 * 9 + 4) * 4);
    expect(e.effect).toMatch(/a copy of it made for this norm \(\+592 bytes/);
    const m = parseModel(res.after, dir);
    expect(m.graph.nodes.map((n) => `${n.name}:${n.opType}`)).toEqual(['conv:Conv', 'conv.clone:Conv', 'relu:Relu', 'residual:Add']);
    expect(m.graph.nodes[0]!.inputs).toEqual(['x', 'cw', 'cb']); // the original is untouched
    // weights: the copy (W and bias, 592 bytes) comes, the norm's 4 parameters (64 bytes) go
    expect(res.ledger.bytesAfter - res.ledger.bytesBefore).toBe(592 - 64);
    // the proof checks the norm path and the original's output the residual reads
    expect(p.cases[0]!.before.outputs).toHaveLength(2);
  });

  it('a producer whose output is also a model output: the copy feeds the norm path, the model output stays', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('features', [1, 4, 4, 4]).output('y', [1, 4, 4, 4]);
    g.node('Conv', ['x', w(g, 'cw', [4, 3, 1, 1], 5)], {}, { name: 'conv', outputs: ['features'] });
    g.node('Relu', [bn(g, 'features', 4, 'bn', 6)], {}, { name: 'relu', outputs: ['y'] });
    const plain = await foldAndCheck(g, feedsFor({ x: [1, 3, 4, 4] }));
    expect(summary(plain.ledger)).toEqual(['bn:kept:graph-output']);
    expect(plain.ledger.normalizations[0]!.hint).toMatch(/--clone-shared/);
    const res = await foldAndCheck(g, feedsFor({ x: [1, 3, 4, 4] }), { cloneShared: true, prove: recordingProver().prove });
    expect(summary(res.ledger)).toEqual(['bn:folded:into-producer:conv']);
    expect(parseModel(res.after, dir).graph.nodes.map((n) => `${n.name}:${n.outputs[0]}`)).toEqual(['conv:features', 'conv.clone:bn_out', 'relu:y']);
  });
});

describe('ranks from shapes propagated through the graph when value_info is missing', () => {
  // x [2, 3, 4] -> Reshape to [6, 4] -> BatchNormalization (channel axis 1 = the last) -> MatMul [4, 5]: the rank
  // at the norm is declared nowhere, but follows from the input's declared shape through the Reshape.
  const build = (shapeFromInput: boolean) => {
    const g = new GraphBuilder();
    g.input('x', [2, 3, 4]).output('y', [6, 5]);
    if (shapeFromInput) g.input('target', [2], 7);
    const rs = g.node('Reshape', ['x', shapeFromInput ? 'target' : g.init('shape', [2], [-1, 4], 7)], {}, { name: 'rs' });
    g.node('MatMul', [bn(g, rs, 4, 'bn', 1), w(g, 'mw', [4, 5], 2)], {}, { name: 'fc', outputs: ['y'] });
    return g;
  };

  it('folds when the rank can be inferred', async () => {
    const res = await foldAndCheck(build(false), feedsFor({ x: [2, 3, 4] }), { prove: recordingProver().prove });
    expect(summary(res.ledger)).toEqual(['bn:folded:into-consumer:fc']);
  });

  it('still refuses, saying what to give, when the shape is computed at run time', async () => {
    const feeds = { ...feedsFor({ x: [2, 3, 4] }), target: { dims: [2], data: BigInt64Array.from([6n, 4n]) } };
    const res = await foldAndCheck(build(true), feeds);
    expect(summary(res.ledger)).toEqual(['bn:kept:axis-mismatch']);
    expect(res.ledger.normalizations[0]!.hint).toMatch(/rank at 'bn' is not declared and cannot be worked out from the model's input shapes; add value_info/);
  });
});
