// LpPool and GlobalLpPool against onnxruntime-node (graph optimizations off) on seeded random geometries, p and
// opsets (LpPool-2, -11, -18 and GlobalLpPool-2 operator docs), plus a hand-computed case for opset 1's float p.
import { describe, expect, it } from 'vitest';
import { randn, rng, modelBytes, f, type AttrIn } from '../helpers/build.js';
import { checkOp, oneNode, type In } from './harness.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';

const int = (r: () => number, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
const prod = (d: number[]) => d.reduce((a, b) => a * b, 1);

function randomLpPool(r: () => number, opset: number): { x: In; attrs: Record<string, AttrIn>; label: string } {
  const sp = int(r, 1, 3);
  const v18 = opset >= 18;
  const kernel: number[] = [], strides: number[] = [], dil: number[] = [], inSp: number[] = [], pads: number[] = [];
  for (let i = 0; i < sp; i++) {
    kernel.push(int(r, 1, 3)); strides.push(int(r, 1, 3)); dil.push(v18 ? int(r, 1, 2) : 1);
    inSp.push((kernel[i]! - 1) * dil[i]! + 1 + int(r, 0, sp === 3 ? 3 : 6));
  }
  for (let i = 0; i < 2 * sp; i++) pads.push(int(r, 0, Math.min(2, kernel[i % sp]! - 1)));
  const attrs: Record<string, AttrIn> = { kernel_shape: kernel, p: int(r, 1, 3) };
  if (r() < 0.7) attrs.strides = strides;
  if (v18 && r() < 0.6) attrs.dilations = dil;
  if (v18 && r() < 0.5) attrs.ceil_mode = 1;
  const ap = ['NOTSET', 'NOTSET', 'NOTSET', 'SAME_UPPER', 'SAME_LOWER', 'VALID'][int(r, 0, 5)]!;
  if (ap === 'NOTSET') attrs.pads = pads;
  else {
    attrs.auto_pad = ap;
    if (ap !== 'VALID') { delete attrs.dilations; delete attrs.ceil_mode; attrs.strides = strides.map((s, i) => Math.min(s, kernel[i]!)); }
  }
  const dims = [int(r, 1, 2), int(r, 1, 3), ...inSp];
  return { x: { name: 'x', dims, data: randn(r, prod(dims)) }, attrs, label: `x[${dims}]` };
}

describe('LpPool vs onnxruntime-node', () => {
  it('opsets 2, 11, 18: p 1 to 3, pads, auto_pad, strides; dilations and ceil_mode at 18', async () => {
    for (let seed = 1; seed <= 48; seed++) {
      const opset = [2, 11, 18][seed % 3]!;
      const c = randomLpPool(rng(seed + 3100), opset);
      await checkOp('LpPool', opset, [c.x], c.attrs, ['y'], 1e-5, `seed ${seed} ${c.label}`);
    }
  });
});

describe('GlobalLpPool vs onnxruntime-node', () => {
  it('opset 2, p 1 to 3, ranks 3 to 5', async () => {
    for (let seed = 1; seed <= 18; seed++) {
      const r = rng(seed + 3300);
      const dims = [int(r, 1, 2), int(r, 1, 4), ...Array.from({ length: int(r, 1, 3) }, () => int(r, 1, 6))];
      const x: In = { name: 'x', dims, data: randn(r, prod(dims)) };
      await checkOp('GlobalLpPool', 2, [x], seed % 4 ? { p: int(r, 1, 3) } : {}, ['y'], 1e-5, `seed ${seed} [${dims}]`);
    }
  });
});

describe('opset 1 float p (LpPool-1, GlobalLpPool-1 operator docs; hand-computed)', () => {
  it('p = 3.0 over a 1-D window of 2 and over the whole axis', () => {
    const xs = [1, -2, 3, -4];
    const run = (op: string, attrs: Record<string, AttrIn>) => {
      const ins: In[] = [{ name: 'x', dims: [1, 1, 4], data: xs }];
      const model = parseModel(modelBytes(oneNode(op, ins, attrs, ['y']), { opset: 1, irVersion: 3 }), '.');
      return Array.from(runModel(model, new Map([['x', { type: 1, dims: [1, 1, 4], data: Float64Array.from(xs) }]]), { precision: 'float64' }).get('y')!.data);
    };
    const cube = (a: number[]) => Math.cbrt(a.reduce((s, v) => s + Math.abs(v) ** 3, 0));
    const got = run('LpPool', { kernel_shape: [2], strides: [2], p: f(3) });
    [cube([1, -2]), cube([3, -4])].forEach((v, i) => expect(got[i]).toBeCloseTo(v, 12));
    expect(run('GlobalLpPool', { p: f(3) })[0]).toBeCloseTo(cube(xs), 12);
  });
});
