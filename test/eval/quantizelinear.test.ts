// QuantizeLinear, DequantizeLinear and DynamicQuantizeLinear. Outside checks: onnxruntime-node (graph
// optimizations off) on seeded QDQ models, with exact integer match; the rounding and saturation rules of the
// ONNX QuantizeLinear docs ("rounding to nearest ties to even", saturate to the output type's range).
import { describe, expect, it } from 'vitest';
import { GraphBuilder } from '../helpers/build.js';
import { SEEDS, T, count, randInt, randShape, randn, rng, vsOrt, vsOrtGraph, type In } from './ort-compare.js';
import { QuantizeLinear } from '../../src/eval/kernels/quantizelinear.js';
import { roundHalfEven } from '../../src/eval/quant.js';
import type { Node } from '../../src/graph/ir.js';

const RANGE: Record<number, [number, number]> = { [T.UINT8]: [0, 255], [T.INT8]: [-128, 127], [T.UINT16]: [0, 65535], [T.INT16]: [-32768, 32767] };

/** x values: random ones, exact ties k + 0.5 of x / scale, and values past the type's range (saturation). */
function probe(r: () => number, n: number, scale: number): Float32Array {
  const x = randn(r, n, 60 * scale);
  for (let i = 0; i < n; i++) {
    const u = r();
    if (u < 0.3) x[i] = (Math.floor(r() * 40) - 20 + 0.5) * scale;
    else if (u < 0.4) x[i] = (r() < 0.5 ? -1 : 1) * 1e6 * scale;
  }
  x[0] = (r() < 0.5 ? -1 : 1) * 1e6 * scale;
  return x;
}

function ctxOf(opset: number, attrs: Node['attributes'] = []) {
  const node: Node = { name: 'q1', opType: 'QuantizeLinear', domain: '', inputs: [], outputs: ['y'], attributes: attrs, docString: '', extra: [] };
  return { node, opset, precision: 'float64' as const, runSubgraph: () => [] };
}

describe('round half to even (ONNX QuantizeLinear docs)', () => {
  it('rounds ties to the even neighbour, others to nearest', () => {
    expect([0.5, 1.5, 2.5, -0.5, -1.5, -2.5, 2.4999, 2.5001, -3.5, 7].map(roundHalfEven)).toEqual([0, 2, 2, -0, -2, -2, 2, 3, -4, 7]);
  });

  it('QuantizeLinear applies it and saturates (uint8 and int8)', () => {
    const x = { type: T.FLOAT, dims: [6], data: Float64Array.of(0.5, 1.5, 2.5, -1.5, 300, -300) };
    const s = { type: T.FLOAT, dims: [], data: Float64Array.of(1) };
    const [u] = QuantizeLinear.run([x, s, { type: T.UINT8, dims: [], data: Float64Array.of(0) }], ctxOf(13));
    expect(Array.from(u!.data)).toEqual([0, 2, 2, 0, 255, 0]);
    const [i] = QuantizeLinear.run([x, s, { type: T.INT8, dims: [], data: Float64Array.of(1) }], ctxOf(13));
    expect(Array.from(i!.data)).toEqual([1, 3, 3, -1, 127, -128]);
  });
});

describe('QuantizeLinear -> DequantizeLinear models (outside check: onnxruntime-node, exact integers)', () => {
  it('per tensor and per axis, uint8/int8 at opset 13, int16/uint16 at opset 21', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      for (const [type, opset] of [[T.UINT8, 13], [T.INT8, 13], [T.INT16, 21], [T.UINT16, 21]] as const) {
        const dims = randShape(r, 1, 4);
        const perAxis = r() < 0.5;
        const axis = Math.floor(r() * dims.length);
        const sn = perAxis ? dims[axis]! : 1;
        const sdims = perAxis ? [sn] : [];
        // power-of-two scales make x / scale exact, so the ties in probe() are real ties
        const scales = Array.from({ length: sn }, () => 2 ** (-Math.floor(r() * 6)));
        const [lo, hi] = RANGE[type]!;
        const zps = randInt(r, sn, Math.max(lo, -20), Math.min(hi, 20) + (lo === 0 ? 20 : 0));
        const x = probe(r, count(dims), scales[0]!);
        const g = new GraphBuilder();
        g.input('x', dims, T.FLOAT);
        g.init('s', sdims, scales, T.FLOAT);
        g.init('z', sdims, zps, type);
        g.node('QuantizeLinear', ['x', 's', 'z'], perAxis ? { axis: axis - (r() < 0.5 ? dims.length : 0) } : {}, { outputs: ['q'] });
        g.node('DequantizeLinear', ['q', 's', 'z'], perAxis ? { axis } : {}, { outputs: ['y'] });
        g.output('q', undefined, type);
        g.output('y', undefined, T.FLOAT);
        const ins: In[] = [{ name: 'x', dims, data: x }];
        const res = await vsOrtGraph(g, ins, opset, [{ name: 'q', type }, { name: 'y' }], undefined, `QDQ seed ${seed} type ${type} dims [${dims}] perAxis ${perAxis}`);
        expect(res.f64.get('q')!.data.some((v) => v === lo || v === hi)).toBe(true); // saturation was exercised
      }
    }
  });

  it('blocked scales along an axis (opset 21 block_size)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 2, 3, 6);
      const axis = Math.floor(r() * dims.length);
      const block = 1 + Math.floor(r() * 3);
      const sdims = dims.map((d, k) => (k === axis ? Math.ceil(d / block) : d));
      const scales = Array.from({ length: count(sdims) }, () => 0.01 + r());
      const zps = randInt(r, count(sdims), -10, 10);
      const g = new GraphBuilder();
      g.input('x', dims, T.FLOAT);
      g.init('s', sdims, scales, T.FLOAT);
      g.init('z', sdims, zps, T.INT8);
      g.node('QuantizeLinear', ['x', 's', 'z'], { axis, block_size: block }, { outputs: ['q'] });
      g.node('DequantizeLinear', ['q', 's', 'z'], { axis, block_size: block }, { outputs: ['y'] });
      g.output('q', undefined, T.INT8);
      g.output('y', undefined, T.FLOAT);
      await vsOrtGraph(g, [{ name: 'x', dims, data: randn(r, count(dims), 40) }], 21, [{ name: 'q', type: T.INT8 }, { name: 'y' }], undefined, `blocked seed ${seed} dims [${dims}] axis ${axis} block ${block}`);
    }
  });

  it('without a zero point: uint8 output (opset 10 form)', async () => {
    const r = rng(7);
    await vsOrt('QuantizeLinear', 10, [{ name: 'x', dims: [3, 5], data: probe(r, 15, 0.5) }, { name: 's', dims: [], data: [0.5], init: true }], {}, [{ name: 'y', type: T.UINT8 }], 0);
  });

  it('DequantizeLinear of int32 (no zero point)', async () => {
    const r = rng(8);
    await vsOrt('DequantizeLinear', 13, [{ name: 'x', dims: [4, 3], data: randInt(r, 12, -100000, 100000), type: T.INT32 }, { name: 's', dims: [3], data: [0.1, 0.02, 3], init: true }], { axis: 1 }, [{ name: 'y' }]);
  });

  it('rejects a per-axis scale of the wrong length', () => {
    const x = { type: T.FLOAT, dims: [2, 3], data: new Float64Array(6) };
    const s = { type: T.FLOAT, dims: [2], data: Float64Array.of(1, 1) };
    expect(() => QuantizeLinear.run([x, s], ctxOf(13))).toThrow(/q1.*per-axis scale has dims \[2\], expected \[3\]/);
  });
});

describe('DynamicQuantizeLinear (outside check: onnxruntime-node, exact integers)', () => {
  it('random data, all-positive and all-negative data', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const dims = randShape(r, 1, 3, 5);
      const shift = seed % 3 === 0 ? 4 : seed % 3 === 1 ? -4 : 0;
      const x = randn(r, count(dims), 2, shift);
      await vsOrt('DynamicQuantizeLinear', 11, [{ name: 'x', dims, data: x }], {}, [{ name: 'y', type: T.UINT8 }, { name: 's' }, { name: 'z', type: T.UINT8 }]);
    }
  });
});
