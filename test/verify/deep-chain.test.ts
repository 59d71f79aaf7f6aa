// The float32 default gate against a 12-layer Conv + BatchNormalization + Relu chain folded by hand with the
// ONNX BatchNormalization formula (Y = (X - mean) / sqrt(var + epsilon) * scale + B): the fold's own rounding
// must pass with a wide margin, and a fold that gets one channel's shift wrong must fail.
import { describe, expect, it } from 'vitest';
import { f, GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { compare } from '../../src/verify/compare.js';
import { DEFAULT_GATES } from '../../src/verify/gate.js';
function chain(bug: boolean) {
  const r = rng(5); const C = 16, L = 12, K = 3;
  const A = new GraphBuilder(), B = new GraphBuilder();
  A.input('x', [1, C, 12, 12]).output('y'); B.input('x', [1, C, 12, 12]).output('y');
  let a = 'x', b = 'x';
  for (let l = 0; l < L; l++) {
    const w = randn(r, C * C * K * K, Math.sqrt(2 / (C * K * K))), sc = randn(r, C, 0.2, 1), sh = randn(r, C, 0.3), mu = randn(r, C, 0.3), va = Float32Array.from(randn(r, C, 0.3, 1), Math.abs);
    A.init(`w${l}`, [C, C, K, K], w); A.init(`s${l}`, [C], sc); A.init(`h${l}`, [C], sh); A.init(`m${l}`, [C], mu); A.init(`v${l}`, [C], va);
    const c = A.node('Conv', [a, `w${l}`], { pads: [1, 1, 1, 1] });
    const bn = A.node('BatchNormalization', [c, `s${l}`, `h${l}`, `m${l}`, `v${l}`], { epsilon: f(1e-5) });
    a = l === L - 1 ? A.node('Identity', [bn], {}, { outputs: ['y'] }) : A.node('Relu', [bn]);
    const wf = new Float32Array(w.length), bf = new Float32Array(C);
    for (let o = 0; o < C; o++) { const s = sc[o]! / Math.sqrt(va[o]! + Math.fround(1e-5)); for (let k = 0; k < C * K * K; k++) wf[o * C * K * K + k] = w[o * C * K * K + k]! * s; bf[o] = sh[o]! - mu[o]! * s; }
    if (bug && l === 5) bf[3] = bf[3]! + 0.05; // a shift off by 0.05 in one channel of one layer
    B.init(`w${l}`, [C, C, K, K], wf); B.init(`b${l}`, [C], bf);
    const cb = B.node('Conv', [b, `w${l}`, `b${l}`], { pads: [1, 1, 1, 1] });
    b = l === L - 1 ? B.node('Identity', [cb], {}, { outputs: ['y'] }) : B.node('Relu', [cb]);
  }
  return compare(parseModel(modelBytes(A), '/tmp'), parseModel(modelBytes(B), '/tmp'), { probes: 2 }).outputs[0]!;
}

describe('float32 default gate on a deep folded chain', () => {
  it('the correct fold passes with a wide margin', () => {
    const y = chain(false);
    expect(y.gate!.expr).toBe(DEFAULT_GATES.float32);
    expect(y.passed).toBe(true);
    expect(y.metrics!.maxRel).toBeLessThan(2e-4); // measured about 6e-5; the gate allows 1e-3
    expect(y.metrics!.maxRel).toBeGreaterThan(0);
    // the model's own float32 rounding is larger than what the fold adds in float64
    expect(y.budget!.own.maxRel).toBeGreaterThan(y.metrics!.maxRel);
  });

  it('a wrong shift in one channel of one layer fails', () => {
    const y = chain(true);
    expect(y.passed).toBe(false);
    expect(y.metrics!.maxRel).toBeGreaterThan(1e-3);
  });
});
