// Pad, Resize, Upsample and If against onnxruntime-node on seeded random cases, every opset form supported,
// plus worked examples from the ONNX operator documentation.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, T, f, fs, randn, rng, modelBytes, type AttrIn } from '../helpers/build.js';
import { checkOp, oneNode, runBoth, type In } from './harness.js';
import { maxDiff } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
const prod = (d: number[]) => d.reduce((a, b) => a * b, 1);
const pick = <X>(r: () => number, xs: X[]): X => xs[int(r, 0, xs.length - 1)]!;

describe('Pad vs onnxruntime-node', () => {
  it('constant/reflect/edge in attribute form (opset 2) and input form (11, 13), wrap (19), axes (18), cropping', async () => {
    for (let seed = 1; seed <= 48; seed++) {
      const r = rng(seed);
      const rank = int(r, 1, 4);
      const dims = Array.from({ length: rank }, () => int(r, 1, 5));
      const opset = [2, 11, 13, 18, 19][seed % 5]!;
      const mode = pick(r, opset >= 19 ? ['constant', 'reflect', 'edge', 'wrap'] : ['constant', 'reflect', 'edge']);
      // reflect needs pads below the axis size; wrap at most the size; constant may crop (negative pads)
      const padFor = (n: number) => mode === 'reflect' ? int(r, 0, n - 1) : mode === 'wrap' ? int(r, 0, n) : mode === 'constant' ? int(r, -Math.min(1, n - 1), 3) : int(r, 0, 3);
      const pads = [...dims.map(padFor), ...dims.map(padFor)];
      const value = mode === 'constant' && r() < 0.5 ? 1.5 : 0;
      const x: In = { name: 'x', dims, data: randn(r, prod(dims)) };
      if (opset < 11) {
        const attrs: Record<string, AttrIn> = { mode, pads };
        if (value) attrs.value = f(value);
        await checkOp('Pad', opset, [x], attrs, ['y'], 0, `seed ${seed} [${dims}] ${mode} [${pads}]`);
      } else if (opset === 18 && rank > 1) {
        const axes = [rank - 1, 0];
        const p = [pads[rank - 1]!, pads[0]!, pads[2 * rank - 1]!, pads[rank]!];
        await checkOp('Pad', opset, [x, { name: 'p', dims: [4], data: p, type: T.INT64, init: true }, { name: 'v', dims: [], data: [value], init: true },
          { name: 'a', dims: [2], data: axes, type: T.INT64, init: true }], { mode }, ['y'], 0, `seed ${seed} [${dims}] ${mode} axes`);
      } else {
        const ins: In[] = [x, { name: 'p', dims: [2 * rank], data: pads, type: T.INT64, init: true }];
        if (value) ins.push({ name: 'v', dims: [], data: [value], init: true });
        await checkOp('Pad', opset, ins, { mode }, ['y'], 0, `seed ${seed} [${dims}] ${mode} [${pads}]`);
      }
    }
  });
  it('worked example (ONNX Operators.md, Pad "constant_pad" style: reflect on a 3x2 matrix; recalled from memory)', () => {
    const ins: In[] = [{ name: 'x', dims: [3, 2], data: [1, 1.2, 2.3, 3.4, 4.5, 5.7] }, { name: 'p', dims: [4], data: [0, 2, 0, 0], type: T.INT64, init: true }];
    const model = parseModel(modelBytes(oneNode('Pad', ins, { mode: 'reflect' }, ['y']), { opset: 11 }), '.');
    const y = runModel(model, new Map([['x', { type: 1, dims: [3, 2], data: Float64Array.from([1, 1.2, 2.3, 3.4, 4.5, 5.7]) }]]), { precision: 'float64' }).get('y')!;
    expect(y.dims).toEqual([3, 4]);
    expect(Array.from(y.data)).toEqual([1, 1.2, 1, 1.2, 2.3, 3.4, 2.3, 3.4, 4.5, 5.7, 4.5, 5.7]);
  });
});

const CTMS = ['half_pixel', 'asymmetric', 'align_corners', 'pytorch_half_pixel'];

describe('Resize vs onnxruntime-node', () => {
  it('opset 11/13/18 nearest (all rounding modes), linear and cubic, every coordinate mode, scales or sizes', async () => {
    for (let seed = 1; seed <= 60; seed++) {
      const r = rng(seed + 70);
      const dims = [int(r, 1, 2), int(r, 1, 2), int(r, 1, 6), int(r, 1, 6)];
      const opset = [11, 13, 18][seed % 3]!;
      const mode = pick(r, ['nearest', 'nearest', 'linear', 'linear', 'cubic']);
      const ctm = pick(r, CTMS);
      const attrs: Record<string, AttrIn> = { mode, coordinate_transformation_mode: ctm };
      if (mode === 'nearest') attrs.nearest_mode = pick(r, ['round_prefer_floor', 'round_prefer_ceil', 'floor', 'ceil']);
      if (mode === 'cubic') { attrs.cubic_coeff_a = f(pick(r, [-0.75, -0.5])); attrs.exclude_outside = int(r, 0, 1); }
      const ins: In[] = [{ name: 'x', dims, data: randn(r, prod(dims)) }];
      const useSizes = r() < 0.5;
      const roi = opset >= 13 ? { name: '', dims: [], data: [] } : { name: 'roi', dims: [0], data: [], init: true };
      if (useSizes) {
        const sizes = [dims[0]!, dims[1]!, int(r, 1, 9), int(r, 1, 9)];
        ins.push(roi, opset >= 13 ? { name: '', dims: [], data: [] } : { name: 's', dims: [0], data: [], init: true },
          { name: 'z', dims: [4], data: sizes, type: T.INT64, init: true });
      } else {
        const sc = [1, 1, pick(r, [0.5, 0.75, 1, 1.5, 2, 3, 0.6, 1.25]), pick(r, [0.5, 1, 2, 2.5, 3, 0.8])];
        // align_corners with a fractional n * scale: onnxruntime and the ONNX reference differ (see below)
        if (ctm === 'align_corners') for (let i = 2; i < 4; i++) sc[i] = Math.max(1, Math.round(dims[i]! * sc[i]!)) / dims[i]!;
        ins.push(roi, { name: 's', dims: [4], data: sc, init: true });
      }
      await checkOp('Resize', opset, ins, attrs, ['y'], 1e-5, `seed ${seed} [${dims}] ${useSizes ? 'sizes' : 'scales'}`);
    }
  });
  it('tf_crop_and_resize with roi and extrapolation_value (opset 11)', async () => {
    for (let seed = 1; seed <= 8; seed++) {
      const r = rng(seed + 900);
      const dims = [1, 1, int(r, 2, 6), int(r, 2, 6)];
      const roi = [0, 0, -0.2 + 0.4 * r(), 0.1 * r(), 1, 1, 0.6 + 0.6 * r(), 0.9 + 0.3 * r()];
      const mode = seed % 2 ? 'linear' : 'nearest';
      // onnxruntime ignores the roi on an axis whose size does not change (the operator docs apply it to every
      // axis), so the cropped axes always change size here
      const size = (n: number) => { let m = int(r, 1, 7); if (m === n) m = n + 1; return m; };
      await checkOp('Resize', 11, [
        { name: 'x', dims, data: randn(r, prod(dims)) }, { name: 'roi', dims: [8], data: roi, init: true },
        { name: 's', dims: [0], data: [], init: true }, { name: 'z', dims: [4], data: [1, 1, size(dims[2]!), size(dims[3]!)], type: T.INT64, init: true },
      ], { mode, coordinate_transformation_mode: 'tf_crop_and_resize', extrapolation_value: f(-3) }, ['y'], 1e-5, `seed ${seed}`);
    }
  });
  it('opset 18 axes and keep_aspect_ratio_policy, opset 19 half_pixel_symmetric', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 1300);
      const dims = [1, 2, int(r, 2, 6), int(r, 2, 6)];
      const x: In = { name: 'x', dims, data: randn(r, prod(dims)) };
      if (seed % 2) {
        const policy = pick(r, ['stretch', 'not_larger', 'not_smaller']);
        await checkOp('Resize', 18, [x, { name: '', dims: [], data: [] }, { name: '', dims: [], data: [] },
          { name: 'z', dims: [2], data: [int(r, 1, 9), int(r, 1, 9)], type: T.INT64, init: true }],
        { mode: pick(r, ['nearest', 'linear']), axes: [2, 3], keep_aspect_ratio_policy: policy }, ['y'], 1e-5, `seed ${seed} ${policy}`);
      } else {
        await checkOp('Resize', 19, [x, { name: '', dims: [], data: [] }, { name: 's', dims: [4], data: [1, 1, pick(r, [0.6, 1.5, 2]), pick(r, [0.5, 1.7])], init: true }],
          { mode: pick(r, ['nearest', 'linear']), coordinate_transformation_mode: 'half_pixel_symmetric' }, ['y'], 1e-5, `seed ${seed}`);
      }
    }
  });
  it('opset 10 form (scales input, asymmetric coordinates)', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 1500);
      const dims = [1, int(r, 1, 2), int(r, 1, 6), int(r, 1, 6)];
      const sc = [1, 1, pick(r, [0.5, 1, 1.5, 2, 3]), pick(r, [0.6, 1, 2, 2.5])];
      await checkOp('Resize', 10, [{ name: 'x', dims, data: randn(r, prod(dims)) }, { name: 's', dims: [4], data: sc, init: true }],
        { mode: seed % 2 ? 'nearest' : 'linear' }, ['y'], 1e-5, `seed ${seed} scales [${sc}]`);
    }
  });
  it('worked example (ONNX Operators.md, resize_upsample_scales_nearest; recalled from memory)', () => {
    const ins: In[] = [{ name: 'x', dims: [1, 1, 2, 2], data: [1, 2, 3, 4] }, { name: '', dims: [], data: [] }, { name: 's', dims: [4], data: [1, 1, 2, 3], init: true }];
    const model = parseModel(modelBytes(oneNode('Resize', ins, { mode: 'nearest' }, ['y']), { opset: 13 }), '.');
    const y = runModel(model, new Map([['x', { type: 1, dims: [1, 1, 2, 2], data: Float64Array.from([1, 2, 3, 4]) }]]), { precision: 'float64' }).get('y')!;
    expect(y.dims).toEqual([1, 1, 4, 6]);
    expect(Array.from(y.data)).toEqual([1, 1, 1, 2, 2, 2, 1, 1, 1, 2, 2, 2, 3, 3, 3, 4, 4, 4, 3, 3, 3, 4, 4, 4]);
  });
});

describe('Resize align_corners when the scale does not give a whole output length (ONNX backend cases)', () => {
  // test_resize_downsample_scales_{linear,cubic}_align_corners (onnx 1.12 backend data, generated by the ONNX
  // reference implementation): x_original = x_resized * (n - 1) / (n * scale - 1), the resized length being
  // n * scale before rounding. onnxruntime 1.30 uses the rounded output length instead ([1, 4] here).
  const run = (mode: string, h: number, w: number, scale: number) => {
    const data = Array.from({ length: h * w }, (_, i) => i + 1);
    const ins: In[] = [{ name: 'x', dims: [1, 1, h, w], data }, { name: '', dims: [], data: [] }, { name: 's', dims: [4], data: [1, 1, scale, scale], init: true }];
    const model = parseModel(modelBytes(oneNode('Resize', ins, { mode, coordinate_transformation_mode: 'align_corners' }, ['y']), { opset: 13 }), '.');
    return runModel(model, new Map([['x', { type: 1, dims: [1, 1, h, w], data: Float64Array.from(data) }]]), { precision: 'float64' }).get('y')!;
  };
  it('linear, 2x4 by 0.6: [1, 3.142857]', () => {
    const y = run('linear', 2, 4, 0.6);
    expect(y.dims).toEqual([1, 1, 1, 2]);
    expect(y.data[0]).toBe(1);
    expect(y.data[1]).toBeCloseTo(1 + 3 / 1.4, 6); // x_original = 1 * 3 / (4 * 0.6 - 1); the scale is float32
  });
  it('cubic, 4x4 by 0.8: the backend case values', () => {
    const y = run('cubic', 4, 4, 0.8);
    const want = [1, 2.3951917, 3.790383, 6.580766, 7.975958, 9.371149, 12.161532, 13.556724, 14.951916];
    expect(y.dims).toEqual([1, 1, 3, 3]);
    want.forEach((v, i) => expect(y.data[i]).toBeCloseTo(v, 5));
  });
});

describe('Resize tf_half_pixel_for_nn (Resize-11/13 operator doc: x_original = (x_resized + 0.5) / scale)', () => {
  it('vs onnxruntime-node: opsets 11, 13 (and 18, 19, which onnxruntime still runs), nearest modes, linear, cubic, scales or sizes', async () => {
    for (let seed = 1; seed <= 32; seed++) {
      const r = rng(seed + 2100);
      const dims = [int(r, 1, 2), int(r, 1, 2), int(r, 1, 6), int(r, 1, 6)];
      const opset = [11, 13, 11, 13, 18, 19][seed % 6]!;
      const mode = pick(r, ['nearest', 'nearest', 'nearest', 'linear', 'cubic']);
      const attrs: Record<string, AttrIn> = { mode, coordinate_transformation_mode: 'tf_half_pixel_for_nn' };
      if (mode === 'nearest') attrs.nearest_mode = pick(r, ['round_prefer_floor', 'round_prefer_ceil', 'floor', 'ceil']);
      const ins: In[] = [{ name: 'x', dims, data: randn(r, prod(dims)) }];
      const roi = opset >= 13 ? { name: '', dims: [], data: [] } : { name: 'roi', dims: [0], data: [], init: true };
      if (r() < 0.5) {
        ins.push(roi, opset >= 13 ? { name: '', dims: [], data: [] } : { name: 's', dims: [0], data: [], init: true },
          { name: 'z', dims: [4], data: [dims[0]!, dims[1]!, int(r, 1, 9), int(r, 1, 9)], type: T.INT64, init: true });
      } else {
        ins.push(roi, { name: 's', dims: [4], data: [1, 1, pick(r, [0.5, 0.75, 1, 1.5, 2, 3, 0.6]), pick(r, [0.5, 1, 1.6, 2, 2.5, 0.8])], init: true });
      }
      await checkOp('Resize', opset, ins, attrs, ['y'], 1e-5, `seed ${seed} [${dims}]`);
    }
  });

  it('downsample by 0.5 and upsample by 1.5 along one axis', () => {
    const run = (n: number, scale: number, mode: string) => {
      const data = Array.from({ length: n }, (_, i) => 10 * (i + 1));
      const ins: In[] = [{ name: 'x', dims: [1, n], data }, { name: '', dims: [], data: [] }, { name: 's', dims: [2], data: [1, scale], init: true }];
      const model = parseModel(modelBytes(oneNode('Resize', ins, { mode: 'nearest', nearest_mode: mode, coordinate_transformation_mode: 'tf_half_pixel_for_nn' }, ['y']), { opset: 13 }), '.');
      return Array.from(runModel(model, new Map([['x', { type: 1, dims: [1, n], data: Float64Array.from(data) }]]), { precision: 'float64' }).get('y')!.data);
    };
    // 0.5: sources (0.5)/0.5 = 1, (1.5)/0.5 = 3 -> elements 1 and 3
    expect(run(4, 0.5, 'floor')).toEqual([20, 40]);
    // 1.5 on 2 elements, 3 outputs: sources 0.333, 1, 1.667 -> floor 0, 1, 1 ; round_prefer_floor 0, 1, 2 -> clamped to 1
    expect(run(2, 1.5, 'floor')).toEqual([10, 20, 20]);
    expect(run(2, 1.5, 'round_prefer_floor')).toEqual([10, 20, 20]);
  });
});

describe('Upsample vs onnxruntime-node', () => {
  it('opset 7 attribute scales and opset 9 input scales, nearest and linear', async () => {
    for (let seed = 1; seed <= 16; seed++) {
      const r = rng(seed + 1700);
      const dims = [1, int(r, 1, 2), int(r, 1, 5), int(r, 1, 5)];
      const sc = [1, 1, pick(r, [1, 2, 3, 1.5]), pick(r, [1, 2, 2.5])];
      const mode = seed % 2 ? 'nearest' : 'linear';
      const x: In = { name: 'x', dims, data: randn(r, prod(dims)) };
      if (seed % 4 < 2) await checkOp('Upsample', 7, [x], { mode, scales: fs(sc) }, ['y'], 1e-5, `seed ${seed}`);
      else await checkOp('Upsample', 9, [x, { name: 's', dims: [4], data: sc, init: true }], { mode }, ['y'], 1e-5, `seed ${seed}`);
    }
  });
});

describe('If vs onnxruntime-node', () => {
  it('runs the chosen branch, which reads outer-scope values', async () => {
    const branch = (op: string) => {
      const b = new GraphBuilder(`${op}_branch`);
      b.output('bo', undefined, T.FLOAT);
      b.node(op, ['x'], { kernel_shape: [2, 2] }, { outputs: ['bo'] });
      return b;
    };
    const r = rng(3);
    const xData = randn(r, 32);
    for (const c of [1, 0]) {
      // the condition is an initializer (the shared onnxruntime helper feeds Uint8Array as uint8, not bool)
      const g = new GraphBuilder();
      g.input('x', [1, 2, 4, 4]).output('y', undefined, T.FLOAT);
      g.init('c', [], [c], T.BOOL);
      g.node('If', ['c'], { then_branch: branch('MaxPool'), else_branch: branch('AveragePool') }, { outputs: ['y'] });
      const ins: In[] = [{ name: 'x', dims: [1, 2, 4, 4], data: xData }];
      const res = await runBoth(g, ins, 13);
      const { maxAbs, scale } = maxDiff(res.f64.get('y')!.data, res.ort.y!.data);
      expect(maxAbs).toBeLessThanOrEqual(1e-6 * scale);
      expect(res.f64.get('y')!.dims).toEqual([1, 2, 3, 3]);
    }
  });
});
