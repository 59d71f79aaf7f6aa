// ConvTranspose against onnxruntime-node on seeded random geometries (groups, strides, dilations, pads,
// output_padding, output_shape, auto_pad), plus the worked example of the ONNX operator documentation.
import { describe, expect, it } from 'vitest';
import { randn, rng, modelBytes, type AttrIn } from '../helpers/build.js';
import { checkOp, oneNode, type In } from './harness.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));

function randomConvT(r: () => number, form: 'pads' | 'output_shape' | 'auto_pad'): { ins: In[]; attrs: Record<string, AttrIn>; label: string } {
  const sp = int(r, 1, 3);
  const group = [1, 1, 2, 3][int(r, 0, 3)]!;
  const Cg = int(r, 1, 3), Mg = int(r, 1, 3), C = Cg * group, N = int(r, 1, 2);
  const kernel: number[] = [], strides: number[] = [], dil: number[] = [], inSp: number[] = [], outPad: number[] = [];
  for (let i = 0; i < sp; i++) {
    kernel.push(int(r, 1, 3)); strides.push(int(r, 1, 3)); dil.push(form === 'auto_pad' ? 1 : int(r, 1, 2));
    inSp.push(int(r, 1, sp === 3 ? 4 : 7));
    outPad.push(int(r, 0, strides[i]! - 1));
  }
  const attrs: Record<string, AttrIn> = { group, strides, dilations: dil };
  if (r() < 0.5) attrs.kernel_shape = kernel;
  if (form === 'pads') {
    attrs.output_padding = outPad;
    attrs.pads = Array.from({ length: 2 * sp }, (_, i) => int(r, 0, Math.min(2, (kernel[i % sp]! - 1) * dil[i % sp]!)));
  } else if (form === 'output_shape') {
    attrs.output_shape = inSp.map((n, i) => strides[i]! * (n - 1) + (kernel[i]! - 1) * dil[i]! + 1 - int(r, 0, Math.min(2, kernel[i]! - 1)));
  } else {
    attrs.auto_pad = r() < 0.5 ? 'SAME_UPPER' : 'VALID';
  }
  const xd = [N, C, ...inSp], wd = [C, Mg, ...kernel];
  const ins: In[] = [
    { name: 'x', dims: xd, data: randn(r, xd.reduce((a, b) => a * b)) },
    { name: 'w', dims: wd, data: randn(r, wd.reduce((a, b) => a * b)), init: true },
  ];
  if (r() < 0.5) ins.push({ name: 'b', dims: [Mg * group], data: randn(r, Mg * group), init: true });
  return { ins, attrs, label: `x[${xd}] w[${wd}]` };
}

describe('ConvTranspose vs onnxruntime-node (seeded random geometries)', () => {
  for (const form of ['pads', 'output_shape', 'auto_pad'] as const) {
    it(`${form} form`, async () => {
      for (let seed = 1; seed <= 30; seed++) {
        const c = randomConvT(rng(seed * 7 + form.length), form);
        await checkOp('ConvTranspose', seed % 2 ? 11 : 7, c.ins, c.attrs, ['y'], 1e-5, `seed ${seed} ${c.label}`);
      }
    });
  }
});

describe('ConvTranspose worked example (ONNX Operators.md, ConvTranspose "convtranspose"; from memory, checked by hand)', () => {
  it('3x3 input, two 3x3 all-ones filters', () => {
    const x = [0, 1, 2, 3, 4, 5, 6, 7, 8];
    const ins: In[] = [{ name: 'x', dims: [1, 1, 3, 3], data: x }, { name: 'w', dims: [1, 2, 3, 3], data: new Array(18).fill(1), init: true }];
    const model = parseModel(modelBytes(oneNode('ConvTranspose', ins, {}, ['y']), { opset: 11 }), '.');
    const y = runModel(model, new Map([['x', { type: 1, dims: [1, 1, 3, 3], data: Float64Array.from(x) }]]), { precision: 'float64' }).get('y')!;
    expect(y.dims).toEqual([1, 2, 5, 5]);
    const plane = [0, 1, 3, 3, 2, 3, 8, 15, 12, 7, 9, 21, 36, 27, 15, 9, 20, 33, 24, 13, 6, 13, 21, 15, 8];
    expect(Array.from(y.data)).toEqual([...plane, ...plane]);
  });
});
