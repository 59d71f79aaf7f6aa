// Pooling against onnxruntime-node on seeded random geometries (pads, strides, dilations, ceil_mode,
// count_include_pad, auto_pad, Indices) and against worked examples of the ONNX operator documentation.
import { describe, expect, it } from 'vitest';
import { randn, rng, modelBytes, type AttrIn } from '../helpers/build.js';
import { checkOp, oneNode, type In } from './harness.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
const prod = (d: number[]) => d.reduce((a, b) => a * b, 1);

function randomPool(r: () => number, opts: { dilations: boolean; ceil: boolean }): { x: In; attrs: Record<string, AttrIn>; label: string } {
  const sp = int(r, 1, 3);
  const kernel: number[] = [], strides: number[] = [], dil: number[] = [], inSp: number[] = [], pads: number[] = [];
  for (let i = 0; i < sp; i++) {
    kernel.push(int(r, 1, 3)); strides.push(int(r, 1, 3)); dil.push(opts.dilations ? int(r, 1, 2) : 1);
    const dk = (kernel[i]! - 1) * dil[i]! + 1;
    inSp.push(dk + int(r, 0, sp === 3 ? 4 : 8));
  }
  // pads must be smaller than the kernel extent (onnxruntime's rule)
  for (let i = 0; i < 2 * sp; i++) pads.push(int(r, 0, Math.min(2, kernel[i % sp]! - 1)));
  const attrs: Record<string, AttrIn> = { kernel_shape: kernel };
  if (r() < 0.7) attrs.strides = strides;
  if (opts.dilations && r() < 0.6) attrs.dilations = dil;
  if (opts.ceil && r() < 0.5) attrs.ceil_mode = 1;
  const ap = ['NOTSET', 'NOTSET', 'NOTSET', 'SAME_UPPER', 'SAME_LOWER', 'VALID'][int(r, 0, 5)]!;
  if (ap === 'NOTSET') attrs.pads = pads;
  else {
    // onnxruntime rejects the negative padding SAME_* gives when a stride exceeds the kernel
    attrs.auto_pad = ap; delete attrs.dilations; delete attrs.ceil_mode;
    attrs.strides = strides.map((s, i) => Math.min(s, kernel[i]!));
  }
  const dims = [int(r, 1, 2), int(r, 1, 3), ...inSp];
  return { x: { name: 'x', dims, data: randn(r, prod(dims)) }, attrs, label: `x[${dims}]` };
}

describe('MaxPool vs onnxruntime-node', () => {
  it('opsets 8, 10, 11, 12 with Indices output at 8+', async () => {
    for (let seed = 1; seed <= 48; seed++) {
      const opset = [8, 10, 11, 12][seed % 4]!;
      const c = randomPool(rng(seed), { dilations: opset >= 10, ceil: opset >= 10 });
      const outs = seed % 3 === 0 ? ['y', 'i:int64'] : ['y'];
      if (outs.length === 2 && c.x.dims.length === 4 && seed % 2) c.attrs.storage_order = 1;
      await checkOp('MaxPool', opset, [c.x], c.attrs, outs, 1e-6, `seed ${seed} ${c.label}`);
    }
  });
});

describe('AveragePool vs onnxruntime-node', () => {
  it('opsets 7, 10, 11, 19: count_include_pad, ceil_mode, dilations (19)', async () => {
    for (let seed = 1; seed <= 48; seed++) {
      const opset = [7, 10, 11, 19][seed % 4]!;
      const c = randomPool(rng(seed + 500), { dilations: opset >= 19, ceil: opset >= 10 });
      if (seed % 2) c.attrs.count_include_pad = 1;
      await checkOp('AveragePool', opset, [c.x], c.attrs, ['y'], 1e-5, `seed ${seed} ${c.label}`);
    }
  });
});

// auto_pad=VALID with ceil_mode=1: the output size is ceil((in - dk + 1) / s) (ONNX Operators, MaxPool/AveragePool
// "auto_pad" output shape); a last window that ceil would start past the input end is dropped, as onnxruntime does.
// The random geometries above drop ceil_mode for auto_pad, so this loop covers the pair on its own.
describe('auto_pad=VALID with ceil_mode=1 vs onnxruntime-node', () => {
  it('MaxPool (opsets 10-12, Indices) and AveragePool (opsets 10, 11, 19) on seeded geometries', async () => {
    for (let seed = 1; seed <= 40; seed++) {
      const r = rng(seed + 1300);
      const sp = int(r, 1, 3);
      const kernel: number[] = [], strides: number[] = [], dil: number[] = [], inSp: number[] = [];
      for (let i = 0; i < sp; i++) {
        kernel.push(int(r, 1, 3)); strides.push(int(r, 1, 4)); dil.push(int(r, 1, 2));
        inSp.push((kernel[i]! - 1) * dil[i]! + 1 + int(r, 0, sp === 3 ? 4 : 7));
      }
      const max = seed % 2 === 0;
      const opset = max ? [10, 11, 12][seed % 3]! : [10, 11, 19][seed % 3]!;
      const attrs: Record<string, AttrIn> = { kernel_shape: kernel, strides, auto_pad: 'VALID', ceil_mode: 1 };
      if (opset >= (max ? 10 : 19)) attrs.dilations = dil;
      const dims = [int(r, 1, 2), int(r, 1, 3), ...inSp];
      const x: In = { name: 'x', dims, data: randn(r, prod(dims)) };
      const outs = max && seed % 4 === 0 ? ['y', 'i:int64'] : ['y'];
      await checkOp(max ? 'MaxPool' : 'AveragePool', opset, [x], attrs, outs, 1e-5, `seed ${seed} x[${dims}]`);
    }
  });
  it('the red-team case: x[1,2,6], kernel 2, stride 3 gives [1,2,2] (onnxruntime-node)', async () => {
    const x: In = { name: 'x', dims: [1, 2, 6], data: randn(rng(7), 12) };
    for (const op of ['MaxPool', 'AveragePool']) {
      const res = await checkOp(op, 11, [x], { kernel_shape: [2], strides: [3], auto_pad: 'VALID', ceil_mode: 1 }, ['y']);
      expect(res.f64.get('y')!.dims).toEqual([1, 2, 2]);
    }
  });
});

describe('MaxPool Indices with storage_order=1 (column-major, MaxPool operator doc) vs onnxruntime-node', () => {
  it('1-D, 2-D and 3-D pools, opsets 8, 10, 11, 12', async () => {
    for (let seed = 1; seed <= 36; seed++) {
      const opset = [8, 10, 11, 12][seed % 4]!;
      const c = randomPool(rng(seed + 1700), { dilations: opset >= 10, ceil: opset >= 10 });
      c.attrs.storage_order = 1;
      await checkOp('MaxPool', opset, [c.x], c.attrs, ['y', 'i:int64'], 1e-6, `seed ${seed} ${c.label}`);
    }
  });
});

describe('GlobalAveragePool, GlobalMaxPool vs onnxruntime-node', () => {
  it('rank 3 to 5', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed + 900);
      const dims = [int(r, 1, 2), int(r, 1, 4), ...Array.from({ length: int(r, 1, 3) }, () => int(r, 1, 6))];
      const x: In = { name: 'x', dims, data: randn(r, prod(dims)) };
      await checkOp(seed % 2 ? 'GlobalAveragePool' : 'GlobalMaxPool', 11, [x], {}, ['y'], 1e-6, `seed ${seed} [${dims}]`);
    }
  });
});

describe('pooling worked examples (ONNX Operators.md, MaxPool/AveragePool "precomputed" examples; recalled from memory)', () => {
  const seq = (n: number) => Array.from({ length: n }, (_, i) => i + 1);
  function pool(op: string, side: number, attrs: Record<string, AttrIn>, opset = 12): number[] {
    const ins: In[] = [{ name: 'x', dims: [1, 1, side, side], data: seq(side * side) }];
    const model = parseModel(modelBytes(oneNode(op, ins, attrs, ['y']), { opset }), '.');
    const y = runModel(model, new Map([['x', { type: 1, dims: [1, 1, side, side], data: Float64Array.from(seq(side * side)) }]]), { precision: 'float64' }).get('y')!;
    return Array.from(y.data, (v) => Math.round(v * 1e6) / 1e6);
  }
  it('maxpool_2d_precomputed_pads, _strides, maxpool_2d_ceil', () => {
    expect(pool('MaxPool', 5, { kernel_shape: [5, 5], pads: [2, 2, 2, 2] })).toEqual([
      13, 14, 15, 15, 15, 18, 19, 20, 20, 20, 23, 24, 25, 25, 25, 23, 24, 25, 25, 25, 23, 24, 25, 25, 25]);
    expect(pool('MaxPool', 5, { kernel_shape: [2, 2], strides: [2, 2] })).toEqual([7, 9, 17, 19]);
    expect(pool('MaxPool', 4, { kernel_shape: [3, 3], strides: [2, 2], ceil_mode: 1 })).toEqual([11, 12, 15, 16]);
  });
  it('averagepool_2d_precomputed_pads, _pads_count_include_pad, _same_upper', () => {
    expect(pool('AveragePool', 5, { kernel_shape: [5, 5], pads: [2, 2, 2, 2] })).toEqual([
      7, 7.5, 8, 8.5, 9, 9.5, 10, 10.5, 11, 11.5, 12, 12.5, 13, 13.5, 14, 14.5, 15, 15.5, 16, 16.5, 17, 17.5, 18, 18.5, 19]);
    expect(pool('AveragePool', 5, { kernel_shape: [5, 5], pads: [2, 2, 2, 2], count_include_pad: 1 })).toEqual([
      2.52, 3.6, 4.8, 4.08, 3.24, 4.56, 6.4, 8.4, 7.04, 5.52, 7.2, 10, 13, 10.8, 8.4,
      // the last two rows as recalled did not survive a hand check (e.g. bottom-left: (11+12+13+16+17+18+21+22+23)/25
      // = 6.12), so they are the hand-computed window sums over 25 taps
      6.96, 9.6, 12.4, 10.24, 7.92, 6.12, 8.4, 10.8, 8.88, 6.84]);
    expect(pool('AveragePool', 5, { kernel_shape: [3, 3], strides: [2, 2], auto_pad: 'SAME_UPPER' })).toEqual([4, 5.5, 7, 11.5, 13, 14.5, 19, 20.5, 22]);
  });
});
