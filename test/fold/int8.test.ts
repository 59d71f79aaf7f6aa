// Simulated 8-bit weights. The rounding rules are the ONNX QuantizeLinear operator's (round half to even, then
// saturate to [-128, 127]); the check is onnxruntime-node running explicit QuantizeLinear -> DequantizeLinear
// nodes on the same weights with the same scales, which must give exactly the values pleat computes. The SQNR
// definition (10 log10 of signal energy over rounding-noise energy) follows Nagel et al. 2019, "Data-Free
// Quantization Through Weight Equalization and Bias Correction", arXiv:1906.04721.
import { describe, expect, it } from 'vitest';
import { channelScales, quantizeDequantize, roundedInt8, roundHalfEven, sqnrOf, symmetricScale } from '../../src/fold/int8.js';
import { layouts, weightView } from '../../src/fold/weights.js';
import { roundedWeightsModel } from '../../src/fold/quant.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import { GraphBuilder, modelBytes, randn, rng, T } from '../helpers/build.js';
import { runOrt } from '../helpers/ort.js';

describe('round half to even (ONNX QuantizeLinear rounding)', () => {
  it('ties go to the even neighbour, others to the nearest', () => {
    const cases: Array<[number, number]> = [[0.5, 0], [1.5, 2], [2.5, 2], [-0.5, -0], [-1.5, -2], [-2.5, -2], [2.4, 2], [2.6, 3], [-2.6, -3], [7, 7]];
    for (const [x, want] of cases) expect(roundHalfEven(x), String(x)).toBe(want);
  });

  it('saturates at the int8 bounds', () => {
    expect(quantizeDequantize(1000, 1)).toBe(127);
    expect(quantizeDequantize(-1000, 1)).toBe(-128);
    expect(quantizeDequantize(5, 0)).toBe(0);
  });
});

/** A model QuantizeLinear(w, scale, 0) -> DequantizeLinear, per tensor (scalar scale) or per channel (axis). */
function qdqModel(dims: number[], scales: number[], axis: number | undefined): Uint8Array {
  const g = new GraphBuilder();
  g.input('w', dims).output('d', dims);
  g.init('s', scales.length === 1 ? [] : [scales.length], scales);
  g.init('z', scales.length === 1 ? [] : [scales.length], scales.map(() => 0), T.INT8);
  const attrs = axis === undefined ? {} : { axis };
  g.node('QuantizeLinear', ['w', 's', 'z'], attrs, { name: 'q', outputs: ['qw'] });
  g.node('DequantizeLinear', ['qw', 's', 'z'], attrs, { name: 'dq', outputs: ['d'] });
  return modelBytes(g, { opset: 13 });
}

describe('quantize-dequantize against onnxruntime-node (exact)', () => {
  for (const seed of [1, 2, 3]) {
    it(`seed ${seed}: Conv weight per tensor and per output channel`, async () => {
      const r = rng(seed);
      const dims = [6, 3, 3, 3];
      const w = randn(r, 6 * 27, 0.2);
      // make channel ranges differ a lot, as after a fold, and put some values exactly on half steps
      for (let i = 0; i < w.length; i++) w[i] = Math.fround(w[i]! * (1 + 40 * (Math.floor(i / 27) % 3)));
      const values = Float64Array.from(w);
      const map = layouts.convOutput(weightView(dims));
      for (const granularity of ['tensor', 'channel'] as const) {
        const scales = channelScales(values, map, 6, granularity);
        const mine = roundedInt8(values, map, 6, granularity);
        const model = granularity === 'tensor' ? qdqModel(dims, [scales[0]!], undefined) : qdqModel(dims, Array.from(scales), 0);
        const ort = await runOrt(model, { w: { dims, data: w } });
        expect(Array.from(mine)).toEqual(Array.from(ort.d!.data));
      }
    });
  }

  it('values on exact half steps round to even like the runtime', async () => {
    const scale = symmetricScale(12.7); // 0.1 in float32
    const w = Float32Array.from([0.05, 0.15, 0.25, -0.05, -0.15, -0.25, 12.7, -12.7].map((x) => Math.fround(x)));
    const ort = await runOrt(qdqModel([8], [scale], undefined), { w: { dims: [8], data: w } });
    expect(Array.from(w, (x) => quantizeDequantize(x, scale))).toEqual(Array.from(ort.d!.data));
  });
});

describe('SQNR', () => {
  it('hand-computed: weights on the grid are exact; a value half a step off costs what it should', () => {
    // one channel [1, 0.5]: scale 1/127; 0.5 * 127 = 63.5 rounds to 64 (even): noise (64/127 - 0.5)^2
    const v = Float64Array.from([1, 0.5]);
    const map = { of: Int32Array.from([0]), unit: 2 };
    const s = sqnrOf(v, map, 1);
    const scale = Math.fround(1 / 127);
    const noise = (Math.fround(64 * scale) - 0.5) ** 2 + (Math.fround(127 * scale) - 1) ** 2;
    expect(s.tensor).toBeCloseTo(10 * Math.log10(1.25 / noise), 9);
    expect(s.channel).toBeCloseTo(s.tensor, 12); // one channel: both scales are the same
    const exact = sqnrOf(Float64Array.from([127, -64].map((x) => x / 127 * 2)), map, 1);
    expect(exact.tensor).toBeGreaterThan(100); // on the grid up to float32 rounding of the scale
  });

  it('per-channel scales never lose to one per-tensor scale; the narrow channel is the worst', () => {
    for (const seed of [4, 5, 6]) {
      const r = rng(seed);
      const dims = [4, 8, 1, 1];
      const w = Float64Array.from(randn(r, 32, 1));
      for (let i = 24; i < 32; i++) w[i] = w[i]! * 1e-3; // channel 3 a thousand times narrower
      const f = sqnrOf(w, layouts.convOutput(weightView(dims)), 4);
      expect(f.channel).toBeGreaterThanOrEqual(f.tensor);
      expect(f.worstChannel).toBeLessThan(f.tensor - 30);
    }
  });
});

describe('one-pass SQNR', () => {
  /** The definition, spelled out over the two rounded copies (sqnrOf computes it in one pass without them). */
  function reference(values: Float64Array, map: { of: Int32Array; unit: number }, channels: number) {
    const t = roundedInt8(values, map, channels, 'tensor'), c = roundedInt8(values, map, channels, 'channel');
    const sig = new Float64Array(channels), nt = new Float64Array(channels);
    let nc = 0;
    for (let e = 0, i = 0; e < map.of.length; e++) {
      for (const end = i + map.unit; i < end; i++) {
        const x = Math.fround(values[i]!), ch = map.of[e]!;
        sig[ch] += x * x; nt[ch] += (x - t[i]!) ** 2; nc += (x - c[i]!) ** 2;
      }
    }
    const db = (s: number, n: number) => (n === 0 ? Infinity : 10 * Math.log10(s / n));
    let s = 0, n = 0, worst = Infinity;
    for (let ch = 0; ch < channels; ch++) { s += sig[ch]!; n += nt[ch]!; if (sig[ch]! > 0) worst = Math.min(worst, db(sig[ch]!, nt[ch]!)); }
    return { tensor: db(s, n), channel: db(s, nc), worstChannel: worst };
  }

  it('equals the figures of the two rounded copies, bit for bit (seeded layers, ties and zero channels included)', () => {
    for (const seed of [11, 12, 13, 14, 15]) {
      const r = rng(seed);
      const channels = 3 + (seed % 5), inner = 2 + seed, dims = [channels, inner, 1, 1];
      const w = Float64Array.from(randn(r, channels * inner, 0.5), (x, i) => Math.fround(x * (1 + 100 * ((i / inner | 0) % 2))));
      w[0] = Math.fround(w[1]! / 2); // a likely half step
      if (seed % 2) w.fill(0, inner, 2 * inner); // a channel of zeros
      const map = layouts.convOutput(weightView(dims));
      expect(sqnrOf(w, map, channels)).toEqual(reference(w, map, channels));
    }
  });

  it('round half to even: the bit test agrees with the remainder test on ties and near-ties of every sign', () => {
    const slow = (x: number) => { const r = Math.round(x); return Math.abs(x % 1) === 0.5 && r % 2 !== 0 ? r - 1 : r; };
    for (let k = -300; k <= 300; k++) {
      for (const x of [k + 0.5, k - 0.5, k + 0.49999999, k + 0.50000001, k, k * 1e7 + 0.5, k * 3e9 + 0.5]) {
        expect(Object.is(roundHalfEven(x), slow(x)), String(x)).toBe(true);
      }
    }
  });
});

describe('roundedWeightsModel', () => {
  it('rounds Conv and Gemm weights in a view, leaves the model and other tensors alone', () => {
    const r = rng(9);
    const g = new GraphBuilder();
    g.input('x', [1, 2, 4, 4]).output('y', [1, 3]);
    g.init('w', [4, 2, 3, 3], randn(r, 72, 0.3));
    g.init('b', [4], randn(r, 4, 0.1));
    g.node('Conv', ['x', 'w', 'b'], {}, { name: 'conv', outputs: ['c'] });
    g.node('GlobalAveragePool', ['c'], {}, { name: 'gap', outputs: ['p'] });
    g.node('Flatten', ['p'], {}, { name: 'flat', outputs: ['f'] });
    g.init('fw', [4, 3], randn(r, 12, 0.5));
    g.node('Gemm', ['f', 'fw'], {}, { name: 'fc', outputs: ['y'] });
    const model = parseModel(modelBytes(g), '.');
    const before = JSON.stringify(model.graph.initializers.map((t) => t.name));
    const { model: q, layers } = roundedWeightsModel(model, 'tensor');
    expect(layers).toBe(2);
    expect(q).not.toBe(model);
    expect(JSON.stringify(model.graph.initializers.map((t) => t.name))).toBe(before);
    // the bias is not a weight: the same tensor object in both
    expect(q.graph.initializers.find((t) => t.name === 'b')).toBe(model.graph.initializers.find((t) => t.name === 'b'));
    expect(q.graph.initializers.find((t) => t.name === 'w')).not.toBe(model.graph.initializers.find((t) => t.name === 'w'));
    const x = new Map([['x', { type: 1, dims: [1, 2, 4, 4], data: Float64Array.from(randn(r, 32, 1)) }]]);
    const y0 = runModel(model, x, { precision: 'float64' }).get('y')!;
    const y1 = runModel(q, x, { precision: 'float64' }).get('y')!;
    const diff = Math.max(...Array.from(y0.data, (v, i) => Math.abs(v - y1.data[i]!)));
    expect(diff).toBeGreaterThan(0);
    expect(diff).toBeLessThan(0.05);
  });
});
