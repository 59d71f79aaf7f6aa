// Fold arithmetic checked on plain arrays against numbers computed by hand from the ONNX BatchNormalization
// formula (ONNX Operators, BatchNormalization: Y = (X - mean) / sqrt(var + epsilon) * scale + B) and against a
// direct loop implementation of each layer written in this test.
import { describe, expect, it } from 'vitest';
import { batchNormAffine, broadcastAffine, channelAxisFromEnd, composeAffine, elementwiseAffine, fitsChannelAxis } from '../../src/fold/affine.js';
import { broadcastDims, contractShift, gemmBias, layouts, producerBias, scaleWeights, weightView } from '../../src/fold/weights.js';
import { rng, randn } from '../helpers/build.js';

describe('per-channel affine map', () => {
  it('matches a worked example computed by hand from the ONNX BatchNormalization formula', () => {
    // gamma=[2,1.5], beta=[1,-1], mean=[3,-2], var=[3,8], eps=1:
    // s = [2/sqrt(4), 1.5/sqrt(9)] = [1, 0.5]; t = [1 - 3*1, -1 - (-2)*0.5] = [-2, 0].
    const a = batchNormAffine([2, 1.5], [1, -1], [3, -2], [3, 8], 1);
    expect(Array.from(a.scale)).toEqual([1, 0.5]);
    expect(Array.from(a.shift)).toEqual([-2, 0]);
    // Folded into a 1x1 conv with W=[[3],[4]], b=[1,-1]: W' = [3, 2], b' = s*b + t = [-1, -0.5].
    const w = Float64Array.of(3, 4);
    const v = weightView([2, 1, 1, 1]);
    scaleWeights(w, layouts.convOutput(v), a.scale, w);
    expect(Array.from(w)).toEqual([3, 2]);
    expect(Array.from(producerBias(Float64Array.of(1, -1), a))).toEqual([-1, -0.5]);
    // and at x = 2 both give the formula's values: conv [7, 7] -> BN [(7-3)/2*2+1, (7+2)/3*1.5-1] = [5, 3.5].
    expect([3 * 2 - 1, 2 * 2 - 0.5]).toEqual([5, 3.5]);
  });

  it('folds a freshly initialized norm (scale 1, shift 0, mean 0, var 1: the usual initial values, common practice) to W / sqrt(1 + eps)', () => {
    const eps = 1e-5;
    const a = batchNormAffine([1, 1, 1], [0, 0, 0], [0, 0, 0], [1, 1, 1], eps);
    const w0 = Float64Array.from(randn(rng(1), 3 * 2 * 3 * 3));
    const w = Float64Array.from(w0);
    const v = weightView([3, 2, 3, 3]);
    scaleWeights(w, layouts.convOutput(v), a.scale, w);
    for (let i = 0; i < w.length; i++) expect(w[i]).toBeCloseTo(w0[i]! / Math.sqrt(1 + eps), 14);
    expect(Array.from(a.shift)).toEqual([0, 0, 0]);
  });

  it('composes chains: second(first(y)) equals the composed map', () => {
    const r = rng(2);
    const f = { scale: Float64Array.from(randn(r, 4)), shift: Float64Array.from(randn(r, 4)) };
    const g = { scale: Float64Array.from(randn(r, 4)), shift: Float64Array.from(randn(r, 4)) };
    const c = composeAffine(f, g);
    for (let i = 0; i < 4; i++) {
      const y = 0.37 * i - 1;
      expect(c.scale[i]! * y + c.shift[i]!).toBeCloseTo(g.scale[i]! * (f.scale[i]! * y + f.shift[i]!) + g.shift[i]!, 12);
    }
    // scalar constants broadcast over channels
    expect(Array.from(broadcastAffine(elementwiseAffine('Mul', false, [3])!, 2).scale)).toEqual([3, 3]);
  });

  it('reads Add/Sub/Mul/Div in both operand orders, and rejects c / x', () => {
    const y = 5;
    const cases: Array<[Parameters<typeof elementwiseAffine>[0], boolean, number]> = [
      ['Add', false, y + 2], ['Add', true, 2 + y], ['Sub', false, y - 2], ['Sub', true, 2 - y], ['Mul', false, y * 2], ['Div', false, y / 2],
    ];
    for (const [op, left, want] of cases) {
      const a = elementwiseAffine(op, left, [2])!;
      expect(a.scale[0]! * y + a.shift[0]!).toBe(want);
    }
    expect(elementwiseAffine('Div', true, [2])).toBeUndefined();
  });

  it('checks broadcasting: per-channel only on the right axis, without changing the shape', () => {
    expect(channelAxisFromEnd([1, 8, 1, 1])).toBe(2);
    expect(channelAxisFromEnd([8, 1, 1])).toBe(2);
    expect(channelAxisFromEnd([1])).toBeNull();
    expect(channelAxisFromEnd([])).toBeNull();
    expect(channelAxisFromEnd([8, 4])).toBeUndefined();
    expect(fitsChannelAxis([1, 8, 1, 1], 4, 2, 8)).toBe(true);
    expect(fitsChannelAxis([8, 1, 1], 4, 2, 8)).toBe(true);
    expect(fitsChannelAxis([8], 4, 2, 8)).toBe(false); // broadcasts along the last axis, not the channels
    expect(fitsChannelAxis([1, 1, 8, 1, 1], 4, 2, 8)).toBe(false); // would add an axis
    expect(fitsChannelAxis([1, 7, 1, 1], 4, 2, 8)).toBe(false);
    expect(fitsChannelAxis([8], undefined, 0, 8)).toBe(true);
    expect(fitsChannelAxis([1, 8], undefined, 0, 8)).toBe(false); // unknown rank: could add an axis
    expect(fitsChannelAxis([1, 1], 2, 0, 8)).toBe(true);
  });
});

// Direct loop implementations (this test's own) of the layers, to check the folds against.
function conv1x1Grouped(x: Float64Array, cin: number, w: Float64Array, cout: number, group: number, b: Float64Array): Float64Array {
  const cinG = cin / group, coutG = cout / group;
  const y = new Float64Array(cout);
  for (let o = 0; o < cout; o++) {
    const g = Math.floor(o / coutG);
    let s = b[o]!;
    for (let j = 0; j < cinG; j++) s += w[o * cinG + j]! * x[g * cinG + j]!;
    y[o] = s;
  }
  return y;
}

function convT1x1Grouped(x: Float64Array, cin: number, w: Float64Array, cout: number, group: number, b: Float64Array): Float64Array {
  const cinG = cin / group, coutG = cout / group;
  const y = Float64Array.from(b);
  for (let i = 0; i < cin; i++) {
    const g = Math.floor(i / cinG);
    for (let j = 0; j < coutG; j++) y[g * coutG + j] += w[i * coutG + j]! * x[i]!;
  }
  return y;
}

describe('weight updates', () => {
  const r = rng(7);
  const aff = (c: number) => ({ scale: Float64Array.from(randn(r, c)), shift: Float64Array.from(randn(r, c)) });
  const apply = (a: { scale: Float64Array; shift: Float64Array }, y: Float64Array) => y.map((v, i) => a.scale[i]! * v + a.shift[i]!);

  it('into a grouped Conv producer: s*conv(x) + t == conv with W\', b\'', () => {
    const cin = 6, cout = 4, group = 2;
    const x = Float64Array.from(randn(r, cin)), w = Float64Array.from(randn(r, cout * (cin / group))), b = Float64Array.from(randn(r, cout));
    const a = aff(cout);
    const want = apply(a, conv1x1Grouped(x, cin, w, cout, group, b));
    const v = weightView([cout, cin / group, 1, 1]);
    const w2 = new Float64Array(w.length);
    scaleWeights(w, layouts.convOutput(v), a.scale, w2);
    const got = conv1x1Grouped(x, cin, w2, cout, group, producerBias(b, a));
    got.forEach((g, i) => expect(g).toBeCloseTo(want[i]!, 12));
  });

  it('into a grouped ConvTranspose producer (W [Cin, Cout/group, k...])', () => {
    const cin = 4, cout = 6, group = 2;
    const x = Float64Array.from(randn(r, cin)), w = Float64Array.from(randn(r, cin * (cout / group))), b = Float64Array.from(randn(r, cout));
    const a = aff(cout);
    const want = apply(a, convT1x1Grouped(x, cin, w, cout, group, b));
    const v = weightView([cin, cout / group, 1]);
    const w2 = new Float64Array(w.length);
    scaleWeights(w, layouts.convTransposeOutput(v, group), a.scale, w2);
    const got = convT1x1Grouped(x, cin, w2, cout, group, producerBias(b, a));
    got.forEach((g, i) => expect(g).toBeCloseTo(want[i]!, 12));
  });

  it('into a grouped Conv consumer: conv(s*x + t) == conv with W\' = W ⊙ s, b\' = b + ΣW·t', () => {
    const cin = 6, cout = 4, group = 2;
    const x = Float64Array.from(randn(r, cin)), w = Float64Array.from(randn(r, cout * (cin / group))), b = Float64Array.from(randn(r, cout));
    const a = aff(cin);
    const want = conv1x1Grouped(apply(a, x), cin, w, cout, group, b);
    const v = weightView([cout, cin / group, 1, 1]);
    const map = layouts.convInput(v, group);
    const shift = contractShift(w, v, map, 'a', cout, a.shift);
    const w2 = new Float64Array(w.length);
    scaleWeights(w, map, a.scale, w2);
    const got = conv1x1Grouped(x, cin, w2, cout, group, b.map((bi, i) => bi + shift[i]!));
    got.forEach((g, i) => expect(g).toBeCloseTo(want[i]!, 12));
  });

  it('Gemm bias keeps any broadcastable C shape: scalar, [N], [M,1], [M,N]', () => {
    const add = Float64Array.of(10, 20, 30);
    expect(gemmBias({ values: Float64Array.of(2), dims: [] }, 0.5, Float64Array.of(1, 2, 3), add)).toEqual({ values: Float64Array.of(11, 22, 33), dims: [3] });
    expect(gemmBias({ values: Float64Array.of(1, 2), dims: [2, 1] }, 1, undefined, add)).toEqual({ values: Float64Array.of(11, 21, 31, 12, 22, 32), dims: [2, 3] });
    expect(gemmBias({ values: Float64Array.of(1, 2, 3), dims: [1, 3] }, 2, undefined, add).dims).toEqual([1, 3]);
    expect(gemmBias(undefined, 1, undefined, add)).toEqual({ values: add, dims: [3] });
    expect(broadcastDims([4, 1], [3])).toEqual([4, 3]);
    expect(broadcastDims([4, 2], [3])).toBeUndefined();
  });

  it('reports the largest folded magnitude, NaN included, for the storage range check', () => {
    const v = weightView([2, 1]);
    expect(scaleWeights(Float64Array.of(1, -3), layouts.rows(v), Float64Array.of(2, 2))).toBe(6);
    expect(scaleWeights(Float64Array.of(1, NaN), layouts.rows(v), Float64Array.of(2, 2))).toBeNaN();
  });
});
