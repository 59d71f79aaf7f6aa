// The shared analysis as audit sees it: every kind of normalization listed with status, direction, target,
// reason and hint; plus the ledger's totals, determinism, byte-identical output when nothing folds, and
// storage types kept (float16, bfloat16, float64).
import { describe, expect, it } from 'vitest';
import { GraphBuilder, f, modelBytes, randn, rng, T } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { tensorToFloat64, roundToStorage, numberToHalfBits, halfBitsToNumber } from '../../src/graph/tensor.js';
import * as ort from 'onnxruntime-node';
import { analyze } from '../../src/fold/index.js';
import { batchNormAffine } from '../../src/fold/affine.js';
import { bnParams, dir, feedsFor, foldAndCheck, foldBytes, summary } from './harness.js';

const w = (g: GraphBuilder, name: string, dims: number[], seed: number, scale = 0.5) => g.init(name, dims, randn(rng(seed), dims.reduce((a, b) => a * b, 1), scale));

describe('audit', () => {
  it('lists runtime-statistics norms, the primitive-op chain, training-form norms, and says where a learned tail could fold', () => {
    const g = new GraphBuilder();
    g.input('x', [2, 4, 6, 6]).input('t', [2, 5, 8]).output('y1').output('y2').output('y3').output('y4').output('y5').output('y6');
    const inorm = g.node('InstanceNormalization', ['x', w(g, 'is', [4], 1), w(g, 'ib', [4], 2)], {}, { name: 'inorm' });
    g.node('Conv', [inorm, w(g, 'cw', [3, 4, 1, 1], 3)], {}, { name: 'after_inorm', outputs: ['y1'] });
    const ln = g.node('LayerNormalization', ['t', w(g, 'ls', [8], 4), w(g, 'lb', [8], 5)], { axis: -1 }, { name: 'ln' });
    g.node('MatMul', [ln, w(g, 'mw', [8, 3], 6)], {}, { name: 'proj', outputs: ['y2'] });
    g.node('LRN', ['x'], { size: 3 }, { name: 'lrn', outputs: ['y3'] });
    g.node('LpNormalization', ['x'], { axis: 1 }, { name: 'lp', outputs: ['y4'] });
    // (t - mean) / sqrt(mean((t - mean)^2) + eps), written out
    const mu = g.node('ReduceMean', ['t'], { axes: [-1] }, { name: 'rm1' });
    const d = g.node('Sub', ['t', mu], {}, { name: 'sub' });
    const sq = g.node('Pow', [d, g.init('two', [], [2])], {}, { name: 'pow' });
    const v = g.node('ReduceMean', [sq], { axes: [-1] }, { name: 'rm2' });
    const ve = g.node('Add', [v, g.init('eps', [], [1e-5])], {}, { name: 'add_eps' });
    const sd = g.node('Sqrt', [ve], {}, { name: 'sqrt' });
    g.node('Div', [d, sd], {}, { name: 'div', outputs: ['y5'] });
    const c = g.node('Conv', ['x', w(g, 'tw', [4, 4, 1, 1], 7)], {}, { name: 'conv_t' });
    g.node('BatchNormalization', [c, ...bnParams(g, 'bnt', 4, 8)], { training_mode: 1 }, { name: 'bn_train', outputs: ['y6', 'rm', 'rv'] });
    const found = analyze(parseModel(modelBytes(g), dir));
    const byNode = Object.fromEntries(found.map((x) => [x.node, x]));
    expect(found.map((x) => `${x.node}:${x.op}:${x.status}:${x.reason}`)).toEqual([
      'inorm:InstanceNormalization:kept:runtime-statistics',
      'ln:LayerNormalization:foldable:null',
      'lrn:LRN:kept:runtime-statistics',
      'lp:LpNormalization:kept:runtime-statistics',
      'div:ReduceMean/Sub/Pow/ReduceMean/Add/Sqrt/Div:kept:runtime-statistics',
      'bn_train:BatchNormalization:kept:training-mode',
    ]);
    expect(byNode.inorm!.hint).toMatch(/could fold into 'after_inorm'/);
    // opset 17's LayerNormalization: statistics stay, the learned Scale and B move into the MatMul reading it
    expect(byNode.ln!.effect).toMatch(/statistics stay .* scale and shift move into 'proj'/);
    expect([byNode.ln!.target, byNode.ln!.direction]).toEqual(['proj', 'into-consumer']);
    expect(byNode.lrn!.hint).toMatch(/no learned scale/);
    expect(byNode.bn_train!.hint).toMatch(/inference mode/);
    for (const x of found) expect(x.graph).toBe('main');
  });

  it('reports foldable norms with direction and target, and a hint for each kept one', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 6, 6]).output('y', [1, 4, 4, 4]);
    const c = g.node('Conv', ['x', w(g, 'w1', [4, 3, 3, 3], 9)], {}, { name: 'conv1' });
    const b1 = g.node('BatchNormalization', [c, ...bnParams(g, 'bn1', 4, 10)], {}, { name: 'bn1' });
    const r = g.node('Relu', [b1], {}, { name: 'relu' });
    g.node('BatchNormalization', [r, ...bnParams(g, 'bn2', 4, 11)], {}, { name: 'bn2', outputs: ['y'] });
    const found = analyze(parseModel(modelBytes(g), dir));
    expect(found.map((x) => [x.node, x.status, x.direction, x.target, x.reason])).toEqual([
      ['bn1', 'foldable', 'into-producer', 'conv1', null],
      ['bn2', 'kept', null, 'conv1', 'nonlinear-between'],
    ]);
    expect(found[1]!.hint).toMatch(/'relu' \(Relu\) sits between/);
  });
});

describe('a per-channel Mul/Add beside a layer whose constant weight no rule takes is listed as kept', () => {
  // The README: every normalization is listed, kept ones included. A MatMul with a 3-D constant weight, or with
  // its constant as the first operand (A), holds weights the MatMul rules do not fold into; the per-channel
  // steps beside it are kept (no-linear-neighbour), fold leaves the model as it computes (onnxruntime-node on
  // both models, foldAndCheck), and audit agrees with fold.
  it('seeded 3-D weights and constant-A MatMuls, producer and consumer side', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 90);
      const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
      const B = pick(1, 3), T0 = pick(2, 5), K = pick(2, 6), N = pick(2, 5);
      const g = new GraphBuilder();
      const form = ['3d-weight', 'const-a-rows', 'const-a-cols', 'const-a-consumer'][seed % 4]!;
      const withAdd = seed % 3 !== 0;
      const steps: string[] = [];
      let feeds;
      if (form === '3d-weight') {
        g.input('x', [B, T0, K]).output('y', [B, T0, N]);
        const c = g.node('MatMul', ['x', w(g, 'w', [B, K, N], seed)], {}, { name: 'mm' });
        const m = g.node('Mul', [c, g.init('s', [N], randn(r, N, 0.3, 1))], {}, { name: 'scale', outputs: [withAdd ? 'm' : 'y'] });
        steps.push('scale');
        if (withAdd) { g.node('Add', [m, g.init('t', [N], randn(r, N))], {}, { name: 'shift', outputs: ['y'] }); steps.push('shift'); }
        feeds = feedsFor({ x: [B, T0, K] }, seed);
      } else if (form === 'const-a-rows' || form === 'const-a-cols') {
        g.input('x', [K, T0]).output('y', [N, T0]);
        const c = g.node('MatMul', [w(g, 'w', [N, K], seed), 'x'], {}, { name: 'mm' });
        const dims = form === 'const-a-rows' ? [N, 1] : [T0];
        const m = g.node('Mul', [c, g.init('s', dims, randn(r, dims[0]!, 0.3, 1))], {}, { name: 'scale', outputs: [withAdd ? 'm' : 'y'] });
        steps.push('scale');
        if (withAdd) { g.node('Add', [m, g.init('t', dims, randn(r, dims[0]!))], {}, { name: 'shift', outputs: ['y'] }); steps.push('shift'); }
        feeds = feedsFor({ x: [K, T0] }, seed);
      } else {
        g.input('x', [K, T0]).output('y', [N, T0]);
        const m = g.node('Mul', ['x', g.init('s', [K, 1], randn(r, K, 0.3, 1))], {}, { name: 'scale' });
        steps.push('scale');
        g.node('MatMul', [w(g, 'w', [N, K], seed), m], {}, { name: 'mm', outputs: ['y'] });
        feeds = feedsFor({ x: [K, T0] }, seed);
      }
      const res = await foldAndCheck(g, feeds);
      expect(res.findings.map((x) => `${x.node}:${x.kind}:${x.status}:${x.reason}`), `seed ${seed} ${form}`)
        .toEqual(steps.map((n) => `${n}:normalization:kept:no-linear-neighbour`));
      expect(res.findings.every((x) => /'mm'/.test(x.hint ?? '')), `seed ${seed}: the hint names the layer`).toBe(true);
    }
  });

  it('a Mul/Add beside a MatMul of two computed values (no weights at all) is still not a normalization', () => {
    const g = new GraphBuilder();
    g.input('q', [2, 4, 8]).input('k', [2, 8, 4]).output('y');
    const c = g.node('MatMul', ['q', 'k'], {}, { name: 'scores' });
    g.node('Mul', [c, g.init('s', [4], [0.5, 0.25, 1, 2])], {}, { name: 'scale', outputs: ['y'] });
    expect(analyze(parseModel(modelBytes(g), dir))).toEqual([]);
  });
});

describe('ledger, determinism and byte identity', () => {
  const resnetish = () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 8, 8]).output('y', [1, 4, 8, 8]);
    const c1 = g.node('Conv', ['x', w(g, 'w1', [4, 3, 3, 3], 12)], { pads: [1, 1, 1, 1] }, { name: 'c1' });
    const b1 = g.node('BatchNormalization', [c1, ...bnParams(g, 'bn1', 4, 13, { nearZeroVar: true })], {}, { name: 'bn1' });
    const r1 = g.node('Relu', [b1], {}, { name: 'r1' });
    const c2 = g.node('Conv', [r1, w(g, 'w2', [4, 4, 3, 3], 14)], { pads: [1, 1, 1, 1] }, { name: 'c2' });
    const b2 = g.node('BatchNormalization', [c2, ...bnParams(g, 'bn2', 4, 15)], {}, { name: 'bn2' });
    const s = g.node('Add', [b2, r1], {}, { name: 'residual' });
    g.node('Relu', [s], {}, { name: 'r2', outputs: ['y'] });
    return g;
  };

  it('counts nodes and weight bytes removed', async () => {
    const r = await foldAndCheck(resnetish(), feedsFor({ x: [1, 3, 8, 8] }));
    expect(summary(r.ledger)).toEqual(['bn1:folded:into-producer:c1', 'bn2:folded:into-producer:c2']);
    expect([r.ledger.nodesBefore, r.ledger.nodesAfter]).toEqual([7, 5]);
    // 8 BN params of 4 floats each go; two biases of 4 floats come: (32 - 8) * 4 bytes less
    expect(r.ledger.bytesBefore - r.ledger.bytesAfter).toBe(24 * 4);
  });

  it('two runs give identical bytes', () => {
    const bytes = modelBytes(resnetish());
    const a = foldBytes(bytes).bytes, b = foldBytes(bytes).bytes;
    expect(Buffer.from(a).equals(Buffer.from(b))).toBe(true);
    expect(Buffer.from(a).equals(Buffer.from(bytes))).toBe(false);
  });

  it('a model with nothing to fold is written byte-identical (unused initializers and doc strings stay)', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2, 4, 4]).output('y', [1, 2, 4, 4]);
    w(g, 'unused', [3], 16);
    const r0 = g.node('Relu', ['x'], {}, { name: 'relu' });
    g.node('BatchNormalization', [r0, ...bnParams(g, 'bn', 2, 17)], {}, { name: 'bn', outputs: ['y'] });
    const bytes = modelBytes(g, { producer: 'some exporter' });
    const out = foldBytes(bytes);
    expect(summary(out.ledger)).toEqual(['bn:kept:no-linear-neighbour']);
    expect(Buffer.from(out.bytes).equals(Buffer.from(bytes))).toBe(true);
  });

  it('keeps value_info of surviving values and drops it for removed ones', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2, 4, 4]).output('y', [1, 2, 2, 2]);
    const c = g.node('Conv', ['x', w(g, 'w', [2, 2, 3, 3], 18)], {}, { name: 'conv' });
    const b = g.node('BatchNormalization', [c, ...bnParams(g, 'bn', 2, 19)], {}, { name: 'bn' });
    g.info(c, [1, 2, 2, 2]).info(b, [1, 2, 2, 2]);
    g.node('Relu', [b], {}, { name: 'relu', outputs: ['y'] });
    const m = parseModel(foldBytes(modelBytes(g)).bytes, dir);
    expect(m.graph.valueInfo.map((v) => v.name)).toEqual([b]);
    expect(m.graph.initializers.map((t) => t.name)).toEqual(['w', 'conv.bias']);
  });
});

describe('storage types', () => {
  const convBn = (type: number) => {
    const g = new GraphBuilder();
    g.input('x', [1, 2, 3, 3], type).output('y', [1, 2, 1, 1], type);
    g.init('w', [2, 2, 3, 3], randn(rng(20), 36, 0.5), type);
    g.init('b', [2], [0.25, -0.5], type);
    const c = g.node('Conv', ['x', 'w', 'b'], {}, { name: 'conv' });
    const ps = [[1.5, -0.75], [0.1, 0.2], [0.3, -0.4], [0.5, 1e-3]];
    ['s', 'B', 'm', 'v'].forEach((k, i) => g.init(k, [2], ps[i]!, type));
    g.node('BatchNormalization', [c, 's', 'B', 'm', 'v'], { epsilon: f(1e-5) }, { name: 'bn', outputs: ['y'] });
    return { g, ps };
  };

  for (const [name, type] of [['float16', T.FLOAT16], ['bfloat16', T.BFLOAT16], ['float64', T.DOUBLE]] as const) {
    it(`stores folded ${name} weights in ${name}, computed in float64 from the stored values`, () => {
      const { g, ps } = convBn(type);
      const bytes = modelBytes(g);
      const src = parseModel(bytes, dir);
      const w0 = tensorToFloat64(src.graph.initializers[0]!);
      const p = src.graph.initializers.slice(2).map(tensorToFloat64);
      const a = batchNormAffine(p[0]!, p[1]!, p[2]!, p[3]!, Math.fround(1e-5));
      const out = foldBytes(bytes);
      expect(summary(out.ledger)).toEqual(['bn:folded:into-producer:conv']);
      const m = parseModel(out.bytes, dir);
      const [wt, bt] = m.graph.initializers;
      expect([wt!.dataType, bt!.dataType]).toEqual([type, type]);
      const want = roundToStorage(w0.map((v, i) => v * a.scale[Math.floor(i / 18)]!), type);
      expect(Array.from(tensorToFloat64(wt!))).toEqual(Array.from(want));
      void ps;
    });
  }

  it('a folded float16 model runs in onnxruntime-node and agrees within float16 rounding (2e-2 of the output scale, common practice)', async () => {
    const { g } = convBn(T.FLOAT16);
    const bytes = modelBytes(g);
    const folded = foldBytes(bytes).bytes;
    const r = rng(21);
    const x = new ort.Tensor('float16', Uint16Array.from(randn(r, 18), (v) => numberToHalfBits(v)), [1, 2, 3, 3]);
    const run = async (b: Uint8Array) => {
      const s = await ort.InferenceSession.create(b, { graphOptimizationLevel: 'disabled', executionProviders: ['cpu'] });
      const y = (await s.run({ x })).y!.data as Uint16Array;
      await s.release();
      return Array.from(y, halfBitsToNumber);
    };
    const want = await run(bytes), got = await run(folded);
    const scale = Math.max(...want.map(Math.abs));
    got.forEach((v, i) => expect(Math.abs(v - want[i]!)).toBeLessThanOrEqual(2e-2 * scale));
  });
});
