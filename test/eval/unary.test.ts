// Unary math kernels against onnxruntime-node on seeded random shapes, and erf against tabulated values
// (Abramowitz & Stegun, Table 7.1).
import { describe, expect, it } from 'vitest';
import { SEEDS, count, randShape, randn, rng, vsOrt } from './ort-compare.js';
import { erf } from '../../src/eval/kernels/unary.js';

const CASES: Array<[string, number, (v: number) => number]> = [
  ['Sqrt', 13, (v) => Math.abs(v)],
  ['Exp', 13, (v) => v],
  ['Log', 13, (v) => 0.01 + Math.abs(v)],
  ['Neg', 13, (v) => v],
  ['Abs', 13, (v) => v],
  ['Reciprocal', 13, (v) => Math.sign(v || 1) * (0.1 + Math.abs(v))],
  ['Erf', 13, (v) => 2 * v],
  ['Floor', 13, (v) => 3 * v],
  ['Ceil', 13, (v) => 3 * v],
  ['Tanh', 13, (v) => 2 * v],
  ['Sigmoid', 13, (v) => 4 * v],
  ['Sign', 13, (v) => (Math.abs(v) < 0.3 ? 0 : v)],
  ['Round', 11, (v) => Math.round(v * 8) / 4], // many exact halves: ties go to even
  ['Softsign', 7, (v) => 3 * v],
  ['Sin', 7, (v) => 3 * v],
  ['Cos', 7, (v) => 3 * v],
  ['Tan', 7, (v) => v],
  ['Asin', 7, (v) => Math.tanh(v)],
  ['Acos', 7, (v) => Math.tanh(v)],
  ['Atan', 7, (v) => 3 * v],
  ['Sinh', 9, (v) => 2 * v],
  ['Cosh', 9, (v) => 2 * v],
  ['Asinh', 9, (v) => 3 * v],
  ['Acosh', 9, (v) => 1 + Math.abs(v)],
  ['Atanh', 9, (v) => 0.9 * Math.tanh(v)],
  ['Sqrt', 7, (v) => Math.abs(v)],
  ['Exp', 7, (v) => v],
];

describe('unary math (outside check: onnxruntime-node)', () => {
  for (const [op, opset, shape] of CASES) {
    it(`${op} at opset ${opset}`, async () => {
      for (const seed of SEEDS) {
        const r = rng(seed);
        const dims = randShape(r);
        await vsOrt(op, opset, [{ name: 'x', dims, data: randn(r, count(dims)).map(shape) }]);
      }
    });
  }

  it('erf matches Abramowitz & Stegun Table 7.1 (erf 0.5, 1, 2) and the erfc tail', () => {
    expect(erf(0.5)).toBeCloseTo(0.5204998778, 10);
    expect(erf(1)).toBeCloseTo(0.8427007929, 10);
    expect(erf(2)).toBeCloseTo(0.9953222650, 10);
    expect(erf(-2)).toBeCloseTo(-0.9953222650, 10);
    // erfc(4) = 1.541725790e-8 (A&S Table 7.1 gives erfc via 2/sqrt(pi) e^{-x^2}, value from the same table)
    expect(1 - erf(4)).toBeCloseTo(1.541725790e-8, 15);
    expect(erf(7)).toBe(1);
    expect(Number.isNaN(erf(NaN))).toBe(true);
  });
});
