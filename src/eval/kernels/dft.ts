// DFT (ONNX operator docs, DFT-17 and DFT-20): the discrete Fourier transform of every line of the input along
// one signal axis. The last axis holds 1 (real) or 2 (real, imaginary) values; the output is always complex.
//   X[k] = sum_n x[n] exp(-+2 pi i k n / N)  (minus forward, plus inverse; the inverse is divided by N)
// dft_length pads the axis with zeros or cuts it; onesided = 1 keeps bins 0..floor(N/2). DFT-17 takes the axis
// as an attribute (default 1), DFT-20 as an optional scalar input (default -2, counted on the input's rank).
// Computed directly (O(N^2) per line) in float64 with an exact twiddle table, which suits the short
// lengths of audio front ends.
import { attrInt } from '../../graph/ir.js';
import { badModel, unsupported } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, elementCount, need } from './common.js';
import { checkMade, checkSteps } from '../limits.js';

/** cos and sin of 2 pi m / n for m in [0, n): exact per entry, indexed by (k * j) mod n. */
export function twiddles(n: number): { cos: Float64Array; sin: Float64Array } {
  const cos = new Float64Array(n), sin = new Float64Array(n);
  for (let m = 0; m < n; m++) { const a = (2 * Math.PI * m) / n; cos[m] = Math.cos(a); sin[m] = Math.sin(a); }
  return { cos, sin };
}

/**
 * One line's DFT: input re/im of length `len` (values past len are zeros up to n), output `bins` complex values
 * into outRe/outIm. `inverse` uses the positive exponent and divides by n.
 */
export function dftLine(re: Float64Array, im: Float64Array, len: number, n: number, bins: number, inverse: boolean,
  tw: { cos: Float64Array; sin: Float64Array }, outRe: Float64Array, outIm: Float64Array): void {
  const sign = inverse ? 1 : -1, m = Math.min(len, n);
  for (let k = 0; k < bins; k++) {
    let sr = 0, si = 0;
    for (let j = 0; j < m; j++) {
      const t = (k * j) % n;
      const c = tw.cos[t]!, s = sign * tw.sin[t]!;
      sr += re[j]! * c - im[j]! * s;
      si += re[j]! * s + im[j]! * c;
    }
    outRe[k] = inverse ? sr / n : sr;
    outIm[k] = inverse ? si / n : si;
  }
}

function dft(x: Value, lengthIn: Value | undefined, axisGiven: number, ctx: KernelContext): Value {
  const inverse = attrInt(ctx.node, 'inverse', 0) !== 0, onesided = attrInt(ctx.node, 'onesided', 0) !== 0;
  if (inverse && onesided) throw unsupported(ctx, 'onesided = 1 together with inverse = 1');
  const r = x.dims.length;
  if (r < 2) throw badModel(ctx, `input has rank ${r}; it needs a signal axis and a last axis of 1 or 2`);
  const c = x.dims[r - 1]!;
  if (c !== 1 && c !== 2) throw badModel(ctx, `the last axis has ${c} values; it must be 1 (real) or 2 (complex)`);
  const axis = axisGiven < 0 ? axisGiven + r : axisGiven;
  if (axis < 0 || axis > r - 2) throw badModel(ctx, `axis ${axisGiven} is not a signal axis of an input of rank ${r}`);
  const len = x.dims[axis]!;
  let n = len;
  if (lengthIn) {
    if (lengthIn.data.length !== 1) throw badModel(ctx, 'dft_length must be a scalar');
    n = Math.trunc(lengthIn.data[0]!);
    if (n < 1) throw badModel(ctx, `dft_length ${n} is not positive`);
  }
  const bins = onesided ? Math.floor(n / 2) + 1 : n;
  const outDims = [...x.dims.slice(0, r - 1), 2];
  outDims[axis] = bins;
  const outer = elementCount(x.dims.slice(0, axis)), inner = elementCount(x.dims.slice(axis + 1, r - 1));
  checkMade(ctx, elementCount(outDims), 'the DFT output');
  checkSteps(ctx, outer * inner * bins * Math.min(len, n), 'the DFT');
  const y = alloc(x.type, elementCount(outDims), ctx);
  const tw = twiddles(n);
  const re = new Float64Array(len), im = new Float64Array(len);
  const oRe = new Float64Array(bins), oIm = new Float64Array(bins);
  const src = x.data;
  for (let o = 0; o < outer; o++) {
    for (let i = 0; i < inner; i++) {
      for (let j = 0; j < len; j++) {
        const at = ((o * len + j) * inner + i) * c;
        re[j] = src[at]!;
        im[j] = c === 2 ? src[at + 1]! : 0;
      }
      dftLine(re, im, len, n, bins, inverse, tw, oRe, oIm);
      for (let k = 0; k < bins; k++) {
        const at = ((o * bins + k) * inner + i) * 2;
        y[at] = oRe[k]!;
        y[at + 1] = oIm[k]!;
      }
    }
  }
  return { type: x.type, dims: outDims, data: y };
}

export const DFT17: Kernel = {
  op: 'DFT', domain: '', sinceVersion: 17,
  run: (inputs, ctx) => [dft(need(inputs, 0, ctx), inputs[1], attrInt(ctx.node, 'axis', 1), ctx)],
};

export const DFT20: Kernel = {
  op: 'DFT', domain: '', sinceVersion: 20,
  run(inputs, ctx) {
    const a = inputs[2];
    if (a && a.data.length !== 1) throw badModel(ctx, 'axis must be a scalar');
    return [dft(need(inputs, 0, ctx), inputs[1], a ? Math.trunc(a.data[0]!) : -2, ctx)];
  },
};
