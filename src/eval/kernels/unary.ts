// Elementwise math on one tensor: Sqrt, Exp, Log, Neg, Abs, Reciprocal, Erf, Floor, Ceil, Tanh, Sigmoid,
// plus Sign, Round (half to even), Softsign and the trigonometric and hyperbolic functions. The output keeps the input's element type (integer Neg/Abs wrap to the type's range).
import type { Kernel } from '../value.js';
import { allocLike, isIntegerType, need, wrapAll } from './common.js';

export function unaryKernel(op: string, fn: (x: number) => number, sinceVersion = 1): Kernel {
  return {
    op, domain: '', sinceVersion,
    run(inputs, ctx) {
      const x = need(inputs, 0, ctx);
      const out = allocLike(inputs, 0, ctx, false); // may be src itself: each element is read before it is written
      const src = x.data;
      for (let i = 0; i < out.length; i++) out[i] = fn(src[i]!);
      if (isIntegerType(x.type)) wrapAll(x.type, out);
      return [{ type: x.type, dims: [...x.dims], data: out }];
    },
  };
}

const TWO_OVER_SQRT_PI = 2 / Math.sqrt(Math.PI);

/**
 * erf to near double precision: the Maclaurin series below |x| = 3 (terms alternate; the largest is ~1e3, so
 * about 13 significant digits survive), and 1 - erfc from its continued fraction above (Abramowitz & Stegun
 * 7.1.5 and 7.1.14).
 */
export function erf(x: number): number {
  if (Number.isNaN(x)) return NaN;
  const ax = Math.abs(x);
  if (ax < 3) {
    const x2 = x * x;
    let term = x, sum = x;
    for (let n = 1; n < 100; n++) {
      term *= -x2 / n;
      const add = term / (2 * n + 1);
      sum += add;
      if (Math.abs(add) < 1e-17 * Math.abs(sum)) break;
    }
    return TWO_OVER_SQRT_PI * sum;
  }
  if (ax > 6) return Math.sign(x); // erfc(6) < 2.2e-17: below double resolution of 1
  // erfc(x) = exp(-x^2)/sqrt(pi) * 1/(x + (1/2)/(x + 1/(x + (3/2)/(x + 2/(x + ...))))), evaluated bottom-up
  let f = ax;
  for (let k = 60; k >= 1; k--) f = ax + k / 2 / f;
  const erfc = Math.exp(-ax * ax) / Math.sqrt(Math.PI) / f;
  return Math.sign(x) * (1 - erfc);
}

export const Sqrt = unaryKernel('Sqrt', Math.sqrt);
export const Exp = unaryKernel('Exp', Math.exp);
export const Log = unaryKernel('Log', Math.log);
export const Neg = unaryKernel('Neg', (x) => -x);
export const Abs = unaryKernel('Abs', Math.abs);
export const Reciprocal = unaryKernel('Reciprocal', (x) => 1 / x);
export const Erf = unaryKernel('Erf', erf, 9);
export const Floor = unaryKernel('Floor', Math.floor);
export const Ceil = unaryKernel('Ceil', Math.ceil);
export const Tanh = unaryKernel('Tanh', Math.tanh);
// 1/(1+e^-x) for x >= 0 and e^x/(1+e^x) below, so neither branch overflows
export const Sigmoid = unaryKernel('Sigmoid', (x) => (x >= 0 ? 1 / (1 + Math.exp(-x)) : Math.exp(x) / (1 + Math.exp(x))));
export const Sign = unaryKernel('Sign', (x) => (Number.isNaN(x) ? NaN : Math.sign(x) + 0), 9);

/** Round half to even, as the ONNX Round docs specify (numpy.round). */
export function roundHalfEven(x: number): number {
  const r = Math.round(x);
  return Math.abs(x % 1) === 0.5 && r % 2 !== 0 ? r - 1 : r;
}

export const Round = unaryKernel('Round', roundHalfEven, 11);
export const Softsign = unaryKernel('Softsign', (x) => x / (1 + Math.abs(x)));
export const Sin = unaryKernel('Sin', Math.sin, 7);
export const Cos = unaryKernel('Cos', Math.cos, 7);
export const Tan = unaryKernel('Tan', Math.tan, 7);
export const Asin = unaryKernel('Asin', Math.asin, 7);
export const Acos = unaryKernel('Acos', Math.acos, 7);
export const Atan = unaryKernel('Atan', Math.atan, 7);
export const Sinh = unaryKernel('Sinh', Math.sinh, 9);
export const Cosh = unaryKernel('Cosh', Math.cosh, 9);
export const Asinh = unaryKernel('Asinh', Math.asinh, 9);
export const Acosh = unaryKernel('Acosh', Math.acosh, 9);
export const Atanh = unaryKernel('Atanh', Math.atanh, 9);
