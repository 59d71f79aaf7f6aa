// LpPool (LpPool-1, -2, -11, -18 operator docs): Y = (sum over the window's taps of |x|^p)^(1/p), over 1 to 3
// spatial axes. Padding taps hold zero, so only taps inside the input count. kernel_shape, strides, pads and
// auto_pad as for the other pools (slidingWindow); ceil_mode is honoured from opset 18, which adds it (and
// dilations). p is a float attribute at opset 1 and an int from opset 2, default 2 in both.
import { attrFloat, attrInt } from '../../graph/ir.js';
import { allocFloat, badModel, need, to3 } from '../attrs.js';
import type { Kernel, KernelContext, NumArray, Value } from '../value.js';
import { axisTaps, windowOf } from './pool.js';

/** The p attribute: a float at opset 1, an int from opset 2 (default 2); p must be positive. */
export function normOrder(ctx: KernelContext): number {
  const p = ctx.opset < 2 ? attrFloat(ctx.node, 'p', 2) : attrInt(ctx.node, 'p', 2);
  if (!(p > 0)) throw badModel(ctx, `attribute p is ${p}; the norm needs p > 0`);
  return p;
}

/** |v|^p for the common p without a pow call. */
export function absPow(v: number, p: number): number {
  const a = Math.abs(v);
  return p === 2 ? a * a : p === 1 ? a : Math.pow(a, p);
}

/** s^(1/p), the inverse of absPow on sums. */
export function root(s: number, p: number): number {
  return p === 2 ? Math.sqrt(s) : p === 1 ? s : Math.pow(s, 1 / p);
}

export const LpPool: Kernel = {
  op: 'LpPool', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X');
    const p = normOrder(ctx);
    const win = windowOf(X, ctx, ctx.opset >= 18 && attrInt(ctx.node, 'ceil_mode', 0) !== 0);
    const N = X.dims[0]!, C = X.dims[1]!;
    const [inD, inH, inW] = to3(X.dims.slice(2), 1), [oD, oH, oW] = to3(win.out, 1);
    const k = to3(win.kernel, 1), s = to3(win.strides, 1), d = to3(win.dilations, 1), pb = to3(win.padBegin, 0), pe = to3(win.padEnd, 0);
    const tD = axisTaps(inD, oD, k[0], s[0], d[0], pb[0], pe[0]);
    const tH = axisTaps(inH, oH, k[1], s[1], d[1], pb[1], pe[1]);
    const tW = axisTaps(inW, oW, k[2], s[2], d[2], pb[2], pe[2]);
    const inVol = inD * inH * inW;
    const Y = allocFloat(N * C * oD * oH * oW, ctx.precision, false);
    const x: NumArray = X.data;
    let yo = 0;
    for (let nc = 0; nc < N * C; nc++) {
      const base = nc * inVol;
      for (let od = 0; od < oD; od++) {
        for (let oh = 0; oh < oH; oh++) {
          for (let ow = 0; ow < oW; ow++, yo++) {
            let sum = 0;
            for (let a = tD.start[od]!; a < tD.start[od + 1]!; a++) {
              const rd = base + tD.idx[a]! * inH * inW;
              for (let b = tH.start[oh]!; b < tH.start[oh + 1]!; b++) {
                const rh = rd + tH.idx[b]! * inW;
                for (let c = tW.start[ow]!; c < tW.start[ow + 1]!; c++) sum += absPow(x[rh + tW.idx[c]!]!, p);
              }
            }
            Y[yo] = root(sum, p);
          }
        }
      }
    }
    const out: Value = { type: X.type, dims: [N, C, ...win.out], data: Y };
    return [out];
  },
};
