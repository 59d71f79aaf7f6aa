// The SIMD quantization-readiness figures (src/fold/int8-simd.ts) against the scalar definitions in
// src/fold/int8.ts and src/fold/quant.ts (themselves checked value for value against onnxruntime-node's
// QuantizeLinear/DequantizeLinear in int8.test.ts): the same spread exactly, the same SQNR up to the order of
// the float64 sums. Seeded layers of every layout the SIMD path takes, with runs whose length is not a multiple
// of four, a channel of zeros, channels a thousand times narrower than the rest, weights on exact half steps,
// float16 weights, NaN; and the layouts it leaves to the scalar path.
import { describe, expect, it } from 'vitest';
import { layerFigures, type LayerShape } from '../../src/fold/quant.js';
import { int8SimdAvailable } from '../../src/fold/int8-simd.js';
import { layouts, weightView } from '../../src/fold/weights.js';
import { makeTensor } from '../../src/graph/tensor.js';
import { DataType } from '../../src/graph/ir.js';
import { randn, rng } from '../helpers/build.js';

function layer(seed: number, dims: number[], layout: 'conv' | 'rows' | 'columns', dataType: number = DataType.FLOAT): LayerShape {
  const r = rng(seed);
  const n = dims.reduce((a, b) => a * b, 1);
  const w = randn(r, n, 0.2);
  const v = weightView(dims);
  const map = layout === 'conv' ? layouts.convOutput(v) : layout === 'rows' ? layouts.rows(v) : layouts.columns(v);
  const channels = layout === 'columns' ? dims[1]! : dims[0]!;
  // channel ranges far apart, as after a fold; a channel of zeros; some weights exactly on half steps
  for (let e = 0, i = 0; e < map.of.length; e++) {
    const c = map.of[e]!;
    for (const end = i + map.unit; i < end; i++) w[i] = c === 1 ? 0 : w[i]! * (c % 3 === 2 ? 1e-3 : 1 + c);
  }
  w[3] = Math.fround(w[5]! / 2);
  return { dims, map, channels, tensor: makeTensor('w', dims, dataType, w) };
}

const close = (a: number, b: number) => (Number.isFinite(a) ? Math.abs(a - b) <= 1e-9 * Math.max(1, Math.abs(b)) : Object.is(a, b));

describe('SIMD quantization-readiness figures', () => {
  it('are available in this runtime', () => expect(int8SimdAvailable()).toBe(true));

  const cases: Array<[string, number[], 'conv' | 'rows' | 'columns', number?]> = [
    ['conv 3x3, runs of 27', [8, 3, 3, 3], 'conv'],
    ['conv 1x1, runs of 17', [6, 17, 1, 1], 'conv'],
    ['conv, runs of 64', [5, 16, 2, 2], 'conv'],
    ['Gemm transB rows of 33', [7, 33], 'rows'],
    ['float16 conv', [4, 5, 3, 3], 'conv', DataType.FLOAT16],
    ['bfloat16 conv', [4, 5, 3, 3], 'conv', DataType.BFLOAT16],
    ['MatMul columns (scalar path)', [40, 6], 'columns'],
    ['double conv (scalar path)', [4, 5, 3, 3], 'conv', DataType.DOUBLE],
  ];
  for (const [name, dims, layout, type] of cases) {
    it(name, () => {
      for (const seed of [1, 2, 3]) {
        const l = layer(seed, dims, layout, type);
        const fast = layerFigures(l, true), ref = layerFigures(l, false);
        expect(fast.spread).toBe(ref.spread);
        expect(fast.channels).toBe(ref.channels);
        for (const k of ['tensor', 'channel', 'worstChannel'] as const) expect(close(fast.sqnr[k], ref.sqnr[k]), `${k}: ${fast.sqnr[k]} vs ${ref.sqnr[k]}`).toBe(true);
      }
    });
  }

  it('a NaN weight poisons the same figures on both paths', () => {
    const l = layer(9, [4, 20, 1, 1], 'conv');
    const w = new Float32Array(80).map((_, i) => Math.sin(i));
    w[41] = NaN;
    const t = makeTensor('w', l.dims, DataType.FLOAT, w);
    const fast = layerFigures({ ...l, tensor: t }, true), ref = layerFigures({ ...l, tensor: t }, false);
    expect(fast.spread).toBe(ref.spread);
    for (const k of ['tensor', 'channel', 'worstChannel'] as const) expect(close(fast.sqnr[k], ref.sqnr[k]), k).toBe(true);
  });

  // layers whose runs are too short for SIMD take the scalar path that finds ranges and scales in one pass:
  // the figures must be the definitions' (channelRanges, spreadOf, sqnrOf) exactly, sums in the same order
  const small: Array<[string, number[], 'conv' | 'rows' | 'columns', number?]> = [
    ['conv 1x1 of 4 channels, runs of 4', [4, 4, 1, 1], 'conv'],
    ['conv 3x3 of one input channel, runs of 9', [6, 1, 3, 3], 'conv'],
    ['MatMul columns', [5, 7], 'columns'],
    ['Gemm rows of 3', [9, 3], 'rows'],
    ['double conv', [4, 2, 1, 1], 'conv', DataType.DOUBLE],
    ['float16 conv', [4, 3, 1, 1], 'conv', DataType.FLOAT16],
  ];
  for (const [name, dims, layout, type] of small) {
    it(`scalar path, exactly the definitions: ${name}`, () => {
      for (const seed of [1, 2, 3, 4, 5]) {
        const l = layer(seed, dims, layout, type);
        expect(layerFigures(l, true)).toEqual(layerFigures(l, false));
      }
    });
  }

  it('scalar path, exactly the definitions: NaN, infinities, a channel of NaN only, -0', () => {
    const dims = [4, 3, 1, 1];
    const l = layer(4, dims, 'conv');
    for (const poison of [[NaN, 1], [Infinity, 7], [-Infinity, 2]] as const) {
      const w = new Float32Array(12).map((_, i) => Math.cos(i) * (i % 4 === 0 ? -0 : 1));
      w[poison[1]] = poison[0];
      w[9] = NaN; w[10] = NaN; w[11] = NaN; // channel 3: no number at all
      const t = makeTensor('w', dims, DataType.FLOAT, w);
      expect(layerFigures({ ...l, tensor: t }, true), String(poison[0])).toEqual(layerFigures({ ...l, tensor: t }, false));
    }
  });
});
