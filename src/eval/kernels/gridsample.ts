// GridSample (opsets 16, 20, 22): samples X (N x C x spatial...) at the normalized coordinates of `grid`
// (N x out spatial... x rank, coordinates in [-1, 1], innermost axis first: x, y, z). Opset 16 is 2-D with modes
// bilinear/nearest/bicubic; opset 20 names them linear/nearest/cubic and allows any spatial rank. Denormalized
// with align_corners (default 0), out-of-range coordinates follow padding_mode (zeros, border, reflection), as
// the ONNX reference implementation and onnxruntime do: nearest rounds half to even first, then border clamps
// and reflection reflects the coordinate; pixels outside read 0 (zeros) or the clamped/reflected pixel. Cubic
// uses the coefficient -0.75.
import { attrInt, attrString } from '../../graph/ir.js';
import { roundHalfEven } from '../quant.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need, unsupported } from './common.js';

const A = -0.75;

function cubicWeights(t: number): [number, number, number, number] {
  const w0 = ((A * (t + 1) - 5 * A) * (t + 1) + 8 * A) * (t + 1) - 4 * A;
  const w1 = ((A + 2) * t - (A + 3)) * t * t + 1;
  const w2 = ((A + 2) * (1 - t) - (A + 3)) * (1 - t) * (1 - t) + 1;
  return [w0, w1, w2, 1 - w0 - w1 - w2];
}

function reflect(x: number, lo: number, hi: number): number {
  const range = hi - lo;
  if (range === 0) return lo;
  if (x < lo) {
    const d = lo - x, n = Math.floor(d / range), r = d - n * range;
    return n % 2 === 0 ? lo + r : hi - r;
  }
  if (x > hi) {
    const d = x - hi, n = Math.floor(d / range), r = d - n * range;
    return n % 2 === 0 ? hi - r : lo + r;
  }
  return x;
}

export const GridSample: Kernel = {
  op: 'GridSample', domain: '', sinceVersion: 16,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), grid = need(inputs, 1, ctx);
    const sp = x.dims.length - 2;
    if (sp < 1 || (ctx.opset < 20 && sp !== 2)) throw badModel(ctx, `input X has rank ${x.dims.length}; GridSample at opset ${ctx.opset} needs ${ctx.opset < 20 ? 'N x C x H x W' : 'N x C x spatial axes'}`);
    const [N, C] = x.dims as [number, number];
    if (grid.dims.length !== sp + 2 || grid.dims[0] !== N || grid.dims[sp + 1] !== sp) throw badModel(ctx, `grid [${grid.dims}] does not fit X [${x.dims}]`);
    const raw = attrString(ctx.node, 'mode', ctx.opset >= 20 ? 'linear' : 'bilinear');
    const mode = raw === 'bilinear' ? 'linear' : raw === 'bicubic' ? 'cubic' : raw;
    if (mode !== 'linear' && mode !== 'nearest' && mode !== 'cubic') throw unsupported(ctx, `mode '${raw}'`);
    const padding = attrString(ctx.node, 'padding_mode', 'zeros');
    if (padding !== 'zeros' && padding !== 'border' && padding !== 'reflection') throw unsupported(ctx, `padding_mode '${padding}'`);
    const align = attrInt(ctx.node, 'align_corners', 0) !== 0;
    const inDims = x.dims.slice(2), outDims = grid.dims.slice(1, sp + 1);
    const inVol = elementCount(inDims), outVol = elementCount(outDims);
    const inStr = inDims.map((_, d) => elementCount(inDims.slice(d + 1)));
    const out = alloc(x.type, N * C * outVol, ctx, false);
    // taps per spatial axis: pixel index (or -1 for a zero pixel) and weight
    const tapIdx: number[][] = Array.from({ length: sp }, () => []);
    const tapW: number[][] = Array.from({ length: sp }, () => []);
    const pixel = (i: number, d: number): number => {
      const size = inDims[d]!;
      if (i >= 0 && i < size) return i;
      if (padding === 'zeros') return -1;
      if (padding === 'border') return Math.min(Math.max(i, 0), size - 1);
      const r = Math.trunc(align ? reflect(i, 0, size - 1) : reflect(i, -0.5, size - 0.5));
      return Math.min(Math.max(r, 0), size - 1);
    };
    for (let n = 0; n < N; n++) {
      for (let o = 0; o < outVol; o++) {
        for (let d = 0; d < sp; d++) {
          // grid's last axis lists x (the innermost spatial axis) first
          const g = grid.data[(n * outVol + o) * sp + (sp - 1 - d)]!;
          const size = inDims[d]!;
          let v = align ? ((g + 1) / 2) * (size - 1) : ((g + 1) * size - 1) / 2;
          if (mode === 'nearest') v = roundHalfEven(v);
          const lo = align ? 0 : -0.5, hi = align ? size - 1 : size - 0.5;
          if (v < lo || v > hi) {
            // cubic keeps the coordinate and clamps each of its four taps instead (onnxruntime; PyTorch does the same)
            if (padding === 'border' && mode !== 'cubic') v = Math.min(Math.max(v, 0), size - 1);
            else if (padding === 'reflection') v = reflect(v, lo, hi);
          }
          const ti = tapIdx[d]!, tw = tapW[d]!;
          ti.length = 0; tw.length = 0;
          if (mode === 'nearest') { ti.push(pixel(roundHalfEven(v), d)); tw.push(1); }
          else if (mode === 'linear') {
            const f = Math.floor(v), t = v - f;
            ti.push(pixel(f, d), pixel(f + 1, d)); tw.push(1 - t, t);
          } else {
            const f = Math.floor(v), w = cubicWeights(v - f);
            for (let k = 0; k < 4; k++) { ti.push(pixel(f - 1 + k, d)); tw.push(w[k]!); }
          }
        }
        const taps = tapIdx[0]!.length;
        const combos = taps ** sp;
        for (let c = 0; c < C; c++) {
          const base = (n * C + c) * inVol;
          let acc = 0;
          for (let m = 0; m < combos; m++) {
            let rem = m, off = 0, w = 1;
            for (let d = sp - 1; d >= 0; d--) {
              const k = rem % taps;
              rem = (rem - k) / taps;
              const i = tapIdx[d]![k]!;
              if (i < 0) { w = 0; break; }
              off += i * inStr[d]!;
              w *= tapW[d]![k]!;
            }
            if (w !== 0) acc += w * x.data[base + off]!;
          }
          out[(n * C + c) * outVol + o] = acc;
        }
      }
    }
    return [{ type: x.type, dims: [N, C, ...outDims], data: out }];
  },
};
