// The per-fold numeric proof: the rewritten region against the original on seeded probes of a small shape
// derived from the layer (no model input shapes needed).
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { foldModel } from '../../src/fold/index.js';
import type { ProofCase } from '../../src/fold/types.js';
import { proveFold } from '../../src/verify/prove.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { setTensorValues } from '../../src/graph/edit.js';
import { foldAndCheck, feedsFor } from '../fold/harness.js';

function convBn(seed: number, rank: 3 | 4 | 5, symbolic: boolean) {
  const r = rng(seed);
  const g = new GraphBuilder();
  const k = rank === 3 ? [3] : rank === 4 ? [3, 3] : [3, 3, 3];
  const sp = k.map(() => (symbolic ? 'n' : 6));
  g.input('x', [symbolic ? 'batch' : 1, 4, ...sp]).output('y');
  g.init('W', [5, 4, ...k], randn(r, 5 * 4 * k.reduce((a, b) => a * b, 1)));
  // Statistics as trained networks have them (mean != 0, var != 1), one near-dead channel.
  g.init('s', [5], uniform(r, 5, 0.5, 1.5)); g.init('b', [5], randn(r, 5, 0.2));
  g.init('m', [5], randn(r, 5, 0.3)); g.init('v', [5], [1e-6, 0.5, 1, 2, 3]);
  const c = g.node('Conv', ['x', 'W'], { kernel_shape: k, pads: [...k.map(() => 1), ...k.map(() => 1)] }, { name: 'conv' });
  g.node('BatchNormalization', [c, 's', 'b', 'm', 'v'], { epsilon: f(1e-5) }, { name: 'bn', outputs: ['y'] });
  return parseModel(modelBytes(g), '/x');
}

describe('per-fold proofs', () => {
  for (const rank of [3, 4, 5] as const) {
    it(`prove a correct Conv${rank - 2}d fold without any model input shape`, () => {
      const cases: ProofCase[] = [];
      const results: boolean[] = [];
      const m = convBn(rank, rank, true);
      const r = foldModel(m, { prove: (c) => { cases.push(c); const p = proveFold(c); results.push(p.passed); return p.passed; } });
      expect(cases).toHaveLength(1);
      expect(results).toEqual([true]);
      expect(r.ledger.normalizations.map((n) => n.status)).toEqual(['folded']);
    });
  }

  it('derive the probe shape from the layer when a per-channel step reads the activation first', () => {
    // A hard-swish tail written out as exporters do (x * clip(x + 3, 0, 6) / 6), read by a padded Conv: the
    // scalar Div folds into the Conv (a pure scale commutes with zero padding). The region's input is read
    // first by the Div, whose scalar constant says nothing about the shape: the Conv must.
    const r = rng(12);
    const g = new GraphBuilder();
    g.input('x', ['batch', 6, 'h', 'w']).output('y');
    const a = g.node('Conv', ['x', g.init('W0', [8, 6, 1, 1], randn(r, 48))], {}, { name: 'conv0' });
    const c = g.node('Clip', [g.node('Add', [a, g.init('three', [], [3])])], {}, { name: 'clip' });
    const m = g.node('Mul', [a, c], {}, { name: 'mul' });
    const d = g.node('Div', [m, g.init('six', [], [6])], {}, { name: 'div' });
    g.node('Conv', [d, g.init('W1', [4, 8, 3, 3], randn(r, 288))], { pads: [1, 1, 1, 1] }, { name: 'conv1', outputs: ['y'] });
    const results: boolean[] = [];
    const out = foldModel(parseModel(modelBytes(g, { opset: 11 }), '/x'), { prove: (pc) => { const p = proveFold(pc); results.push(p.passed); return p.passed; } });
    expect(results).toEqual([true]);
    expect(out.ledger.normalizations.filter((n) => n.node === 'div').map((n) => [n.status, n.target])).toEqual([['folded', 'conv1']]);
  });

  it('fail a wrong fold (a weight off by 1% in one channel), so fold keeps the original with proof-failed', () => {
    const m = convBn(9, 4, false);
    let seen: ReturnType<typeof proveFold> | undefined;
    const r = foldModel(m, {
      prove: (c) => {
        // sabotage the rewritten region: the proof must notice
        const w = c.after.initializers.find((t) => t.dims.length === 4)!;
        const v = tensorToFloat64(w);
        for (let i = 0; i < v.length / 5; i++) v[i] = v[i]! * 1.01;
        setTensorValues(w, v);
        seen = proveFold(c);
        return seen.passed;
      },
    });
    expect(seen!.passed).toBe(false);
    expect(seen!.maxAbs).toBeGreaterThan(seen!.tolerance * seen!.scale);
    expect(r.ledger.normalizations.map((n) => [n.status, n.reason])).toEqual([['kept', 'proof-failed']]);
  });
});

describe('probe shapes take the dims the model declares when the small probe does not fit', () => {
  // Gemm whose C holds one bias per row ([M, 1], M declared): only M rows broadcast against C, so a probe with
  // the layer's small row count is refused by the original region itself. The fold is still valid: checked
  // with onnxruntime-node on both models (foldAndCheck) and by the proof, which must pass at the declared M.
  it('Gemm (C per row, transA/transB) -> BatchNormalization folds, proven at the declared row count', async () => {
    for (let seed = 1; seed <= 8; seed++) {
      const r = rng(seed + 400);
      const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
      const M = [2, 4, 5, 6, 7][pick(0, 4)]!, K = pick(2, 9), N = pick(2, 6);
      const transA = seed % 2, transB = (seed >> 1) % 2;
      const g = new GraphBuilder();
      g.input('x', transA ? [K, M] : [M, K]).output('y', [M, N]);
      g.init('w', transB ? [N, K] : [K, N], randn(r, K * N));
      g.init('c', [M, 1], randn(r, M));
      g.init('s', [N], uniform(r, N, 0.5, 1.5)); g.init('b', [N], randn(r, N, 0.2));
      g.init('m', [N], randn(r, N, 0.3)); g.init('v', [N], uniform(r, N, 0.1, 2));
      const gm = g.node('Gemm', ['x', 'w', 'c'], { transA, transB }, { name: 'dense' });
      g.node('BatchNormalization', [gm, 's', 'b', 'm', 'v'], { epsilon: f(1e-5) }, { name: 'bn', outputs: ['y'] });
      const proofs: Array<ReturnType<typeof proveFold>> = [];
      const res = await foldAndCheck(g, feedsFor({ x: transA ? [K, M] : [M, K] }, seed), { prove: (c) => { const p = proveFold(c); proofs.push(p); return p.passed; } }, { opset: 13 });
      expect(res.ledger.normalizations.map((n) => `${n.status}:${n.reason ?? ''}`), `seed ${seed} M ${M}`).toEqual(['folded:']);
      expect(proofs.map((p) => p.shape), `seed ${seed}`).toEqual([transA ? [K, M] : [M, K]]);
    }
  });

  it('a symbolic row count keeps the small probe (a per-column C fits any M)', () => {
    const r = rng(5);
    const g = new GraphBuilder();
    g.input('x', ['rows', 4]).output('y');
    g.init('w', [4, 3], randn(r, 12)); g.init('c', [3], randn(r, 3));
    g.init('s', [3], uniform(r, 3, 0.5, 1.5)); g.init('b', [3], randn(r, 3)); g.init('m', [3], randn(r, 3)); g.init('v', [3], uniform(r, 3, 0.5, 2));
    g.node('BatchNormalization', [g.node('Gemm', ['x', 'w', 'c'], {}, { name: 'dense' }), 's', 'b', 'm', 'v'], {}, { name: 'bn', outputs: ['y'] });
    const shapes: number[][] = [];
    foldModel(parseModel(modelBytes(g), '/x'), { prove: (c) => { const p = proveFold(c); shapes.push(p.shape); return p.passed; } });
    expect(shapes).toEqual([[3, 4]]);
  });
});
