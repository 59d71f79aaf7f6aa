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
