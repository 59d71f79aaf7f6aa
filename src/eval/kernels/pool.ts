// MaxPool, AveragePool, GlobalAveragePool, GlobalMaxPool over 1 to 3 spatial axes.
// Window geometry (kernel_shape, strides, pads, auto_pad, dilations, ceil_mode) comes from slidingWindow.
// AveragePool divides by the number of window taps inside the input, or with count_include_pad=1 by the
// taps inside the explicitly padded input (taps that ceil_mode pushes past the end padding never count).
// MaxPool's optional Indices output is the flat row-major index into X (storage_order=1: column-major
// within each N x C plane, for 1 to 3 spatial axes).
import { attrInt, attrInts, DataType, elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, need, slidingWindow, to3, type Window } from '../attrs.js';
import type { Kernel, KernelContext, NumArray, Value } from '../value.js';

export interface AxisTaps {
  /** For output position o: input indices of its valid taps are idx[start[o] .. start[o+1]). */
  start: Int32Array;
  idx: Int32Array;
  /** Taps inside the explicitly padded extent, per output position. */
  padded: Int32Array;
}

/** The input taps of each output position along one spatial axis (shared with LpPool, lppool.ts). */
export function axisTaps(n: number, out: number, k: number, s: number, d: number, pb: number, pe: number): AxisTaps {
  const start = new Int32Array(out + 1), padded = new Int32Array(out);
  const idx: number[] = [];
  for (let o = 0; o < out; o++) {
    start[o] = idx.length;
    let p = 0;
    for (let t = 0; t < k; t++) {
      const i = o * s - pb + t * d;
      if (i >= 0 && i < n) idx.push(i);
      if (i >= -pb && i < n + pe) p++;
    }
    padded[o] = p;
  }
  start[out] = idx.length;
  return { start, idx: Int32Array.from(idx), padded };
}

/**
 * A row-major offset within one pooled plane (spatial axes padded in front to D x H x W) as the column-major
 * offset over the model's own spatial axes: the first spatial axis varies fastest (MaxPool doc, storage_order;
 * onnxruntime-node gives the same for 1-D, 2-D and 3-D pools, and for a 1-D pool the two orders are one).
 */
function columnMajor(local: number, inD: number, inH: number, inW: number, spatial: number): number {
  const d = Math.floor(local / (inH * inW)), h = Math.floor(local / inW) % inH, w = local % inW;
  if (spatial === 1) return w;
  if (spatial === 2) return h + w * inH;
  return d + h * inD + w * inD * inH;
}

function pool(X: Value, win: Window, ctx: KernelContext, mode: 'max' | 'avg', countPad: boolean, wantIdx: boolean, storageOrder: number): Value[] {
  const N = X.dims[0]!, C = X.dims[1]!, inSp = X.dims.slice(2);
  const [inD, inH, inW] = to3(inSp, 1), [oD, oH, oW] = to3(win.out, 1);
  const k = to3(win.kernel, 1), s = to3(win.strides, 1), d = to3(win.dilations, 1), pb = to3(win.padBegin, 0), pe = to3(win.padEnd, 0);
  const tD = axisTaps(inD, oD, k[0], s[0], d[0], pb[0], pe[0]);
  const tH = axisTaps(inH, oH, k[1], s[1], d[1], pb[1], pe[1]);
  const tW = axisTaps(inW, oW, k[2], s[2], d[2], pb[2], pe[2]);
  const inVol = inD * inH * inW, outVol = oD * oH * oW;
  const Y = allocFloat(N * C * outVol, ctx.precision, false);
  const I = wantIdx ? new Float64Array(N * C * outVol) : undefined;
  const x: NumArray = X.data;
  let yo = 0;
  for (let nc = 0; nc < N * C; nc++) {
    const base = nc * inVol;
    for (let od = 0; od < oD; od++) {
      const d0 = tD.start[od]!, d1 = tD.start[od + 1]!;
      for (let oh = 0; oh < oH; oh++) {
        const h0 = tH.start[oh]!, h1 = tH.start[oh + 1]!;
        for (let ow = 0; ow < oW; ow++, yo++) {
          const w0 = tW.start[ow]!, w1 = tW.start[ow + 1]!;
          if (mode === 'max') {
            let best = -Infinity, at = -1;
            for (let a = d0; a < d1; a++) {
              const rd = base + tD.idx[a]! * inH * inW;
              for (let b = h0; b < h1; b++) {
                const rh = rd + tH.idx[b]! * inW;
                for (let c = w0; c < w1; c++) {
                  const v = x[rh + tW.idx[c]!]!;
                  // NaN propagates, as a max over IEEE values does in onnxruntime
                  if (v > best || (v !== v && best === best)) { best = v; at = rh + tW.idx[c]!; }
                }
              }
            }
            Y[yo] = best;
            if (I) I[yo] = storageOrder === 1 ? base + columnMajor(at - base, inD, inH, inW, inSp.length) : at;
          } else {
            let sum = 0;
            for (let a = d0; a < d1; a++) {
              const rd = base + tD.idx[a]! * inH * inW;
              for (let b = h0; b < h1; b++) {
                const rh = rd + tH.idx[b]! * inW;
                for (let c = w0; c < w1; c++) sum += x[rh + tW.idx[c]!]!;
              }
            }
            const count = countPad
              ? tD.padded[od]! * tH.padded[oh]! * tW.padded[ow]!
              : (d1 - d0) * (h1 - h0) * (w1 - w0);
            Y[yo] = count > 0 ? sum / count : NaN;
          }
        }
      }
    }
  }
  const dims = [N, C, ...win.out];
  const out: Value[] = [{ type: X.type, dims, data: Y }];
  if (I) out.push({ type: DataType.INT64, dims: [...dims], data: I });
  return out;
}

/** The pooling window of node ctx.node over X (N x C x 1 to 3 spatial axes); `ceil` is its ceil_mode. */
export function windowOf(X: Value, ctx: KernelContext, ceil = attrInt(ctx.node, 'ceil_mode', 0) !== 0): Window {
  if (X.dims.length < 3 || X.dims.length > 5) throw badModel(ctx, `input has rank ${X.dims.length}; pooling needs N x C x 1 to 3 spatial axes`);
  const kernel = attrInts(ctx.node, 'kernel_shape');
  if (!kernel) throw badModel(ctx, 'attribute kernel_shape is required');
  return slidingWindow(ctx, X.dims.slice(2), kernel, ceil);
}

export const MaxPool: Kernel = {
  op: 'MaxPool', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X');
    const wantIdx = ctx.node.outputs.length > 1 && ctx.node.outputs[1] !== '';
    const order = attrInt(ctx.node, 'storage_order', 0);
    return pool(X, windowOf(X, ctx), ctx, 'max', false, wantIdx, order);
  },
};

export const AveragePool: Kernel = {
  op: 'AveragePool', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X');
    return pool(X, windowOf(X, ctx), ctx, 'avg', attrInt(ctx.node, 'count_include_pad', 0) !== 0, false, 0);
  },
};

/** x[lo] + ... + x[hi - 1] in order (its own function: called per channel, so optimized early). */
function sumRange(x: NumArray, lo: number, hi: number): number {
  let s = 0;
  for (let j = lo; j < hi; j++) s += x[j]!;
  return s;
}

function globalPool(inputs: Array<Value | undefined>, ctx: KernelContext, mode: 'max' | 'avg'): Value[] {
  const X = need(inputs, 0, ctx, 'X');
  if (X.dims.length < 2) throw badModel(ctx, `input has rank ${X.dims.length}; global pooling needs N x C x ...`);
  const NC = X.dims[0]! * X.dims[1]!, inner = elementCount(X.dims.slice(2));
  const Y = allocFloat(NC, ctx.precision, false), x = X.data;
  for (let i = 0; i < NC; i++) {
    const o = i * inner;
    if (mode === 'avg') {
      Y[i] = sumRange(x, o, o + inner) / inner;
    } else {
      let m = -Infinity;
      for (let j = o; j < o + inner; j++) { const v = x[j]!; if (v > m || v !== v) m = v; if (m !== m) break; }
      Y[i] = m;
    }
  }
  return [{ type: X.type, dims: [X.dims[0]!, X.dims[1]!, ...X.dims.slice(2).map(() => 1)], data: Y }];
}

export const GlobalAveragePool: Kernel = { op: 'GlobalAveragePool', domain: '', sinceVersion: 1, run: (i, c) => globalPool(i, c, 'avg') };
export const GlobalMaxPool: Kernel = { op: 'GlobalMaxPool', domain: '', sinceVersion: 1, run: (i, c) => globalPool(i, c, 'max') };
