// Conv against onnxruntime-node on seeded random geometries, and against the worked examples of the ONNX
// operator documentation (Operators.md, Conv: conv_with_padding / conv_without_padding / strides examples).
import { describe, expect, it } from 'vitest';
import { randn, rng, type AttrIn } from '../helpers/build.js';
import { checkOp, type In } from './harness.js';
import { runModel } from '../../src/eval/run.js';
import { parseModel } from '../../src/onnx/read.js';
import { modelBytes } from '../helpers/build.js';
import { oneNode } from './harness.js';
import { setSimd } from '../../src/eval/gemm.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));

interface ConvCase { ins: In[]; attrs: Record<string, AttrIn>; label: string }

export function randomConv(r: () => number, depthwise: boolean): ConvCase {
  const sp = int(r, 1, 3);
  const group = depthwise ? int(r, 2, 6) : [1, 1, 2, 3][int(r, 0, 3)]!;
  const Cg = depthwise ? 1 : int(r, 1, 4), Mg = depthwise ? int(r, 1, 2) : int(r, 1, 4);
  const C = Cg * group, M = Mg * group, N = int(r, 1, 2);
  const kernel: number[] = [], strides: number[] = [], dil: number[] = [], inSp: number[] = [];
  const maxIn = sp === 3 ? 7 : sp === 2 ? 12 : 20;
  for (let i = 0; i < sp; i++) {
    kernel.push(int(r, 1, 3)); strides.push(int(r, 1, 3)); dil.push(int(r, 1, 2));
    const dk = (kernel[i]! - 1) * dil[i]! + 1;
    inSp.push(dk + int(r, 0, maxIn - dk));
  }
  const autoPad = ['NOTSET', 'NOTSET', 'NOTSET', 'SAME_UPPER', 'SAME_LOWER', 'VALID'][int(r, 0, 5)]!;
  const attrs: Record<string, AttrIn> = { group, strides, dilations: dil };
  if (r() < 0.5) attrs.kernel_shape = kernel;
  // onnxruntime refuses dilations with SAME_* padding, so those cases use dilation 1
  if (autoPad.startsWith('SAME')) attrs.dilations = dil.map(() => 1);
  if (autoPad === 'NOTSET') attrs.pads = Array.from({ length: 2 * sp }, () => int(r, 0, 2));
  else attrs.auto_pad = autoPad;
  const xd = [N, C, ...inSp], wd = [M, Cg, ...kernel];
  const ins: In[] = [
    { name: 'x', dims: xd, data: randn(r, xd.reduce((a, b) => a * b)) },
    { name: 'w', dims: wd, data: randn(r, wd.reduce((a, b) => a * b)), init: r() < 0.5 },
  ];
  if (r() < 0.6) ins.push({ name: 'b', dims: [M], data: randn(r, M), init: true });
  return { ins, attrs, label: `x[${xd}] w[${wd}]` };
}

describe('Conv vs onnxruntime-node (seeded random geometries)', () => {
  it('general and grouped convolutions, 1-D/2-D/3-D, pads/strides/dilations/auto_pad', async () => {
    for (let seed = 1; seed <= 60; seed++) {
      const c = randomConv(rng(seed), false);
      await checkOp('Conv', seed % 2 ? 11 : 7, c.ins, c.attrs, ['y'], 1e-5, `seed ${seed} ${c.label}`);
    }
  });
  it('depthwise convolutions (one input channel per group, channel multiplier 1 or 2)', async () => {
    for (let seed = 100; seed <= 140; seed++) {
      const c = randomConv(rng(seed), true);
      await checkOp('Conv', 11, c.ins, c.attrs, ['y'], 1e-5, `seed ${seed} ${c.label}`);
    }
  });
  it('stride-1 depthwise (the SIMD path) and the same cases on the scalar path', async () => {
    for (const simd of [true, false]) {
      setSimd(simd);
      try {
        for (let seed = 200; seed <= 225; seed++) {
          const c = randomConv(rng(seed), true);
          c.attrs.strides = (c.attrs.strides as number[]).map(() => 1);
          await checkOp('Conv', 11, c.ins, c.attrs, ['y'], 1e-5, `simd ${simd} seed ${seed} ${c.label}`);
        }
      } finally { setSimd(true); }
    }
  });
  it('strided depthwise (the SIMD path stores each padded row as its column phases) and the scalar path', async () => {
    for (const simd of [true, false]) {
      setSimd(simd);
      try {
        for (let seed = 300; seed <= 330; seed++) {
          const c = randomConv(rng(seed), true);
          // strides 2 and 3 on every axis; dilations and pads stay random
          c.attrs.strides = (c.attrs.strides as number[]).map((_, i) => 2 + ((seed + i) % 2));
          await checkOp('Conv', 11, c.ins, c.attrs, ['y'], 1e-5, `simd ${simd} seed ${seed} ${c.label}`);
        }
        // the MobileNet shape: 3x3, stride 2, pads 1, on an even and an odd plane
        for (const side of [16, 15]) {
          const r = rng(side);
          await checkOp('Conv', 13, [
            { name: 'x', dims: [1, 6, side, side], data: randn(r, 6 * side * side) },
            { name: 'w', dims: [6, 1, 3, 3], data: randn(r, 54), init: true },
            { name: 'b', dims: [6], data: randn(r, 6), init: true },
          ], { group: 6, strides: [2, 2], pads: [1, 1, 1, 1] }, ['y'], 1e-5, `simd ${simd} side ${side}`);
        }
      } finally { setSimd(true); }
    }
  });
  it('1x1 pointwise and a larger 3x3 layer (GEMM blocking edges)', async () => {
    const r = rng(7);
    await checkOp('Conv', 13, [
      { name: 'x', dims: [1, 37, 9, 11], data: randn(r, 37 * 99) },
      { name: 'w', dims: [70, 37, 1, 1], data: randn(r, 70 * 37), init: true },
      { name: 'b', dims: [70], data: randn(r, 70), init: true },
    ]);
    await checkOp('Conv', 13, [
      { name: 'x', dims: [1, 40, 33, 31], data: randn(r, 40 * 33 * 31) },
      { name: 'w', dims: [131, 40, 3, 3], data: randn(r, 131 * 360), init: true },
    ], { pads: [1, 0, 2, 1], strides: [1, 2] });
  });
});

describe('Conv worked examples (ONNX Operators.md, Conv; values recalled from memory, checked by hand)', () => {
  const x = Array.from({ length: 25 }, (_, i) => i);
  const ones = new Array(9).fill(1);
  async function conv(xd: number[], attrs: Record<string, AttrIn>): Promise<number[]> {
    const ins: In[] = [{ name: 'x', dims: xd, data: Array.from({ length: xd.reduce((a, b) => a * b) }, (_, i) => i) }, { name: 'w', dims: [1, 1, 3, 3], data: ones, init: true }];
    const model = parseModel(modelBytes(oneNode('Conv', ins, attrs, ['y']), { opset: 11 }), '.');
    const out = runModel(model, new Map([['x', { type: 1, dims: xd, data: Float64Array.from(ins[0]!.data) }]]), { precision: 'float64' });
    return Array.from(out.get('y')!.data);
  }
  it('conv_with_padding and conv_without_padding', async () => {
    expect(await conv([1, 1, 5, 5], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] })).toEqual([
      12, 21, 27, 33, 24, 33, 54, 63, 72, 51, 63, 99, 108, 117, 81, 93, 144, 153, 162, 111, 72, 111, 117, 123, 84]);
    expect(await conv([1, 1, 5, 5], { kernel_shape: [3, 3], pads: [0, 0, 0, 0] })).toEqual([54, 63, 72, 99, 108, 117, 144, 153, 162]);
    expect(x.length).toBe(25);
  });
  it('conv_with_strides_padding and conv_with_strides_no_padding (7x5 input, strides 2)', async () => {
    expect(await conv([1, 1, 7, 5], { kernel_shape: [3, 3], pads: [1, 1, 1, 1], strides: [2, 2] })).toEqual([
      12, 27, 24, 63, 108, 81, 123, 198, 141, 112, 177, 124]);
    expect(await conv([1, 1, 7, 5], { kernel_shape: [3, 3], pads: [0, 0, 0, 0], strides: [2, 2] })).toEqual([54, 72, 144, 162, 234, 252]);
  });
});
