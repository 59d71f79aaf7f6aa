// Quantization readiness: per-output-channel weight ranges (max - min of each channel's weights) and their
// spread (largest / median), checked against ranges computed by hand below. Method: Nagel et al. 2019,
// "Data-Free Quantization Through Weight Equalization and Bias Correction", arXiv:1906.04721 (section 3: the
// per-channel ranges of a folded layer can differ by orders of magnitude, which per-tensor quantization loses).
import { describe, expect, it } from 'vitest';
import { parseModel } from '../../src/onnx/read.js';
import { foldModel } from '../../src/fold/index.js';
import { channelRanges, quantReadiness, spreadOf, QUANT_THRESHOLD_DB } from '../../src/fold/quant.js';
import { layouts, weightView } from '../../src/fold/weights.js';
import type { LedgerEntry } from '../../src/fold/types.js';
import { GraphBuilder, modelBytes } from '../helpers/build.js';

const close = (got: number, want: number) => expect(got).toBeCloseTo(want, 12);
// weights stored in a model are float32: hand values like 0.1 are rounded to 24 bits first
const close32 = (got: number, want: number) => expect(Math.abs(got - want)).toBeLessThanOrEqual(1e-6 * Math.abs(want));

// A Conv weight [Cout=4, Cin=1, 1, 2], values chosen so each channel's range is easy to see:
//   c0: [ 0.1, -0.1] -> range 0.2
//   c1: [ 0.5,  0.3] -> range 0.2
//   c2: [ 1.0, -1.0] -> range 2.0
//   c3: [ 0.0,  0.4] -> range 0.4
// sorted ranges 0.2, 0.2, 0.4, 2.0: median (0.2 + 0.4) / 2 = 0.3, spread 2.0 / 0.3 = 6.667
const W = [0.1, -0.1, 0.5, 0.3, 1.0, -1.0, 0.0, 0.4];

function convModel(w: number[], named = true): Uint8Array {
  const g = new GraphBuilder();
  g.input('x', [1, 1, 3, 4]).output('y', [1, 4, 3, 3]);
  g.init('w', [4, 1, 1, 2], w);
  g.node('Conv', ['x', 'w'], {}, { name: named ? 'conv' : '', outputs: ['c'] });
  // scale 1, 1, 1, 100 on channel 3 (a near-dead channel's 1/sqrt(var + eps) is large, as in trained networks)
  g.init('sc', [4], [1, 1, 1, 100]); g.init('sh', [4], [0, 0, 0, 0]); g.init('mu', [4], [0, 0, 0, 0]); g.init('va', [4], [1, 1, 1, 1]);
  g.node('BatchNormalization', ['c', 'sc', 'sh', 'mu', 'va'], { epsilon: 0 } as never, { name: 'bn', outputs: ['y'] });
  return modelBytes(g);
}

describe('channel ranges and spread (hand-computed)', () => {
  it('Conv: output channel axis 0', () => {
    const dims = [4, 1, 1, 2];
    const r = channelRanges(Float64Array.from(W), layouts.convOutput(weightView(dims)), 4);
    [0.2, 0.2, 2.0, 0.4].forEach((want, c) => close(r[c]!, want));
    close(spreadOf(r), 2.0 / 0.3);
  });

  it('ConvTranspose: output channel axis 1, times group', () => {
    // W [Cin=2, Cout/group=2, k=2], group 1: channel j is W[:, j, :]
    //   j0: W[0,0,:] = [1, 2], W[1,0,:] = [3, -1] -> range 3 - (-1) = 4
    //   j1: W[0,1,:] = [0, 0], W[1,1,:] = [0.5, 0] -> range 0.5
    const w = Float64Array.from([1, 2, 0, 0, 3, -1, 0.5, 0]);
    const dims = [2, 2, 2];
    const r1 = channelRanges(w, layouts.convTransposeOutput(weightView(dims), 1), 2);
    close(r1[0]!, 4); close(r1[1]!, 0.5);
    // group 2: W [Cin=2, Cout/group=2, k=2] -> 4 output channels; input channel i feeds channels 2*i + j
    //   c0 = W[0,0,:] = [1, 2] -> 1;  c1 = W[0,1,:] = [0, 0] -> 0;  c2 = W[1,0,:] = [3, -1] -> 4;  c3 = W[1,1,:] = [0.5, 0] -> 0.5
    const r2 = channelRanges(w, layouts.convTransposeOutput(weightView(dims), 2), 4);
    [1, 0, 4, 0.5].forEach((want, c) => close(r2[c]!, want));
    // sorted 0, 0.5, 1, 4: median 0.75, spread 4 / 0.75
    close(spreadOf(r2), 4 / 0.75);
  });

  it('Gemm/MatMul: columns of [K, N], rows of [N, K] with transB', () => {
    // [K=2, N=3] = [[1, 0, 5], [-1, 0.25, 5]]: column ranges 2, 0.25, 0
    const w = Float64Array.from([1, 0, 5, -1, 0.25, 5]);
    const cols = channelRanges(w, layouts.columns(weightView([2, 3])), 3);
    [2, 0.25, 0].forEach((want, c) => close(cols[c]!, want));
    // the same numbers read as [N=2, K=3] rows: [1, 0, 5] -> 5, [-1, 0.25, 5] -> 6
    const rows = channelRanges(w, layouts.rows(weightView([2, 3])), 2);
    close(rows[0]!, 5); close(rows[1]!, 6);
  });

  it('edge cases: an all-zero layer has spread 1; a zero median with a live channel is infinite', () => {
    expect(spreadOf(Float64Array.from([0, 0, 0]))).toBe(1);
    expect(spreadOf(Float64Array.from([0, 0, 3]))).toBe(Infinity);
    expect(spreadOf(Float64Array.from([2]))).toBe(1);
  });
});

describe('quantReadiness', () => {
  const ledger: LedgerEntry[] = [{ node: 'bn', op: 'BatchNormalization', status: 'folded', direction: 'into-producer', target: 'conv', reason: null, hint: '', graph: 'main' }];

  it('on a hand-folded model: spread 6.667 before, 36.36 after, flagged', () => {
    // after the fold channel 3 holds 100 * [0, 0.4] = [0, 40] -> range 40; ranges 0.2, 0.2, 2, 40:
    // median (0.2 + 2) / 2 = 1.1, spread 40 / 1.1 = 36.36. One per-tensor scale 40 / 127 = 0.315 rounds
    // channel 0's +-0.1 (0.317 steps) to 0: its noise equals its signal, SQNR 0 dB < 20 dB: flagged.
    const folded = [...W.slice(0, 6), 0, 40];
    const rows = quantReadiness(parseModel(convModel(W), '.'), parseModel(convModel(folded), '.'), ledger);
    expect(rows).toHaveLength(1);
    expect(rows[0]!.target).toBe('conv');
    expect(rows[0]!.norms).toEqual(['bn']);
    expect(rows[0]!.channels).toBe(4);
    close32(rows[0]!.spreadBefore, 2 / 0.3);
    close32(rows[0]!.spreadAfter, 40 / 1.1);
    expect(rows[0]!.sqnrAfter.worstChannel).toBeCloseTo(0, 12);
    expect(rows[0]!.flagged).toBe(true);
    expect(QUANT_THRESHOLD_DB).toBe(20);
  });

  it('not flagged when every channel keeps its SQNR above the threshold, nor when the fold made nothing worse', () => {
    const before = () => parseModel(convModel(W), '.'), after = () => parseModel(convModel(W.map((v) => 2 * v)), '.');
    const rows = quantReadiness(before(), after(), ledger);
    close32(rows[0]!.spreadAfter, 2 / 0.3);
    expect(rows[0]!.flagged).toBe(false);
    expect(rows[0]!.sqnrAfter.worstChannel).toBeGreaterThan(20);
    // a uniform scale changes no channel's SQNR: below an 80 dB threshold, but not brought there by the fold
    const high = quantReadiness(before(), after(), ledger, 80)[0]!;
    expect(high.sqnrAfter.worstChannel).toBeLessThan(80);
    expect(high.flagged).toBe(false);
    // a fold that widens one channel 100-fold (as in the hand-folded model above) is flagged at 80 dB too
    expect(quantReadiness(before(), parseModel(convModel([...W.slice(0, 6), 0, 40]), '.'), ledger, 80)[0]!.flagged).toBe(true);
  });

  it('with the real fold engine, named and unnamed layers', () => {
    for (const named of [true, false]) {
      const bytes = convModel(W, named);
      const before = parseModel(Uint8Array.from(bytes), '.');
      const after = parseModel(Uint8Array.from(bytes), '.');
      const { ledger: l } = foldModel(after, {});
      const rows = quantReadiness(before, after, l.normalizations);
      expect(rows).toHaveLength(1);
      close32(rows[0]!.spreadBefore, 2 / 0.3);
      close32(rows[0]!.spreadAfter, 40 / 1.1); // epsilon 0, variance 1: s = scale exactly
      expect(rows[0]!.flagged).toBe(true);
    }
  });

  it('kept entries give no rows', () => {
    const kept: LedgerEntry[] = [{ ...ledger[0]!, status: 'kept', target: null, reason: 'kept-by-user' }];
    expect(quantReadiness(parseModel(convModel(W), '.'), parseModel(convModel(W), '.'), kept)).toEqual([]);
  });
});

describe('quantReadiness with --clone-shared copies', () => {
  /** conv's output c is graph output c and read by bn (output y): --clone-shared folds bn into a copy of conv. */
  function sharedConvModel(w: number[]): Uint8Array {
    const g = new GraphBuilder();
    g.input('x', [1, 1, 3, 4]).output('c', [1, 4, 3, 3]).output('y', [1, 4, 3, 3]);
    g.init('w', [4, 1, 1, 2], w);
    g.node('Conv', ['x', 'w'], {}, { name: 'conv', outputs: ['c'] });
    g.init('sc', [4], [1, 1, 1, 100]); g.init('sh', [4], [0, 0, 0, 0]); g.init('mu', [4], [0, 0, 0, 0]); g.init('va', [4], [1, 1, 1, 1]);
    g.node('BatchNormalization', ['c', 'sc', 'sh', 'mu', 'va'], { epsilon: 0 } as never, { name: 'bn', outputs: ['y'] });
    return modelBytes(g);
  }

  it('the real fold engine: the after figures are the folded copy\'s (spread 6.667 -> 36.36, flagged), not the untouched original\'s', () => {
    const bytes = sharedConvModel(W);
    const before = parseModel(Uint8Array.from(bytes), '.'), after = parseModel(Uint8Array.from(bytes), '.');
    const { ledger: l } = foldModel(after, { cloneShared: true });
    expect(l.normalizations.map((e) => [e.node, e.status, e.target, e.copy])).toEqual([['bn', 'folded', 'conv', 'conv.clone']]);
    const rows = quantReadiness(before, after, l.normalizations);
    expect(rows).toHaveLength(1);
    expect([rows[0]!.target, rows[0]!.copy, rows[0]!.norms]).toEqual(['conv', 'conv.clone', ['bn']]);
    close32(rows[0]!.spreadBefore, 2 / 0.3);
    // the copy's channel 3 is 100 * [0, 0.4] (epsilon 0, variance 1): ranges 0.2, 0.2, 2, 40, spread 40 / 1.1;
    // channel 0's +-0.1 rounds to 0 under the per-tensor scale 40 / 127 (see the hand-folded case above)
    close32(rows[0]!.spreadAfter, 40 / 1.1);
    expect(rows[0]!.sqnrAfter.worstChannel).toBeCloseTo(0, 12);
    expect(rows[0]!.flagged).toBe(true);
  });

  it('a later fold that reaches both the original and the copy: one row each, the copy\'s holding both norms', () => {
    // hand-built folded model: conv (weights doubled by bn_pre) feeds c; conv.clone (bn_pre, then bn_post's
    // 100-fold channel 3) feeds y
    const g = new GraphBuilder();
    g.input('x', [1, 1, 3, 4]).output('c', [1, 4, 3, 3]).output('y', [1, 4, 3, 3]);
    g.init('w', [4, 1, 1, 2], W.map((v) => 2 * v));
    g.init('w.folded', [4, 1, 1, 2], [...W.slice(0, 6).map((v) => 2 * v), 0, 80]);
    g.node('Conv', ['x', 'w'], {}, { name: 'conv', outputs: ['c'] });
    g.node('Conv', ['x', 'w.folded'], {}, { name: 'conv.clone', outputs: ['y'] });
    const folded = (node: string, targets: string[], copy?: string): LedgerEntry => ({
      node, op: 'BatchNormalization', kind: 'normalization', status: 'folded', direction: 'into-producer', target: targets.join(', '), targets,
      cloneBytes: copy ? 32 : 0, reason: null, hint: null, effect: 'scales', graph: 'main', ...(copy ? { copy } : {}),
    });
    const ledgerOf = [folded('bn_pre', ['conv', 'conv.clone']), folded('bn_post', ['conv'], 'conv.clone')];
    const rows = quantReadiness(parseModel(sharedConvModel(W), '.'), parseModel(modelBytes(g), '.'), ledgerOf);
    expect(rows.map((r) => [r.target, r.copy, r.norms])).toEqual([['conv', undefined, ['bn_pre']], ['conv', 'conv.clone', ['bn_pre', 'bn_post']]]);
    for (const r of rows) close32(r.spreadBefore, 2 / 0.3);
    close32(rows[0]!.spreadAfter, 2 / 0.3); // a uniform factor keeps the spread
    close32(rows[1]!.spreadAfter, 80 / 2.2); // ranges 0.4, 0.4, 4, 80: median 2.2
  });
});
