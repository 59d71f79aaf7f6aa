// Image <-> column rearrangement for Conv (im2col) and ConvTranspose (col2im, its adjoint).
// Spatial shapes are given as three axes (D, H, W); 1-D and 2-D convolutions use leading axes of size 1.
// The column matrix has C*kd*kh*kw rows (channel-major, then kernel offsets) and od*oh*ow columns, so
// Conv becomes W[M x C*k] * col[C*k x od*oh*ow] for one group.
import type { NumArray } from './value.js';

export interface Geometry3 {
  /** Image size (the Conv input; the ConvTranspose output). */
  inD: number; inH: number; inW: number;
  /** Sliding-window grid size (the Conv output; the ConvTranspose input). */
  outD: number; outH: number; outW: number;
  kD: number; kH: number; kW: number;
  sD: number; sH: number; sW: number;
  dD: number; dH: number; dW: number;
  pD: number; pH: number; pW: number; // begin pads
}

/** Range [lo, hi) of output positions o where o*s - p + k*d lands inside [0, n). */
function validRange(n: number, outN: number, s: number, p: number, kOff: number): [number, number] {
  // need 0 <= o*s + (kOff - p) < n
  const shift = kOff - p;
  let lo = shift >= 0 ? 0 : Math.ceil(-shift / s);
  let hi = Math.ceil((n - shift) / s);
  if (lo > outN) lo = outN;
  if (hi > outN) hi = outN;
  if (hi < lo) hi = lo;
  return [lo, hi];
}

/**
 * col[dst + o] = x[src + o*s] for o in [lo, hi). A separate small function so the engine optimizes it after a few
 * calls and keeps it optimized across runs (inlined in one long loop nest it ran unoptimized on every new run).
 */
function copyRow(col: NumArray, dst: number, x: NumArray, src: number, lo: number, hi: number, s: number): void {
  if (s === 1) { if (hi - lo >= 32) col.set(x.subarray(src + lo, src + hi), dst + lo); else for (let o = lo; o < hi; o++) col[dst + o] = x[src + o]!; return; }
  for (let o = lo; o < hi; o++) col[dst + o] = x[src + o * s]!;
}

/** Fill col (rows C*kD*kH*kW, cols outD*outH*outW) from image x (C x inD x inH x inW at xOff). */
export function im2col(x: NumArray, xOff: number, C: number, g: Geometry3, col: NumArray): void {
  const { inD, inH, inW, outD, outH, outW, kD, kH, kW, sD, sH, sW, dD, dH, dW, pD, pH, pW } = g;
  const outPlane = outH * outW, N = outD * outPlane, inPlane = inH * inW, inVol = inD * inPlane;
  let row = 0;
  for (let c = 0; c < C; c++) {
    const xc = xOff + c * inVol;
    for (let kd = 0; kd < kD; kd++) {
      const [d0, d1] = validRange(inD, outD, sD, pD, kd * dD);
      for (let kh = 0; kh < kH; kh++) {
        const [h0, h1] = validRange(inH, outH, sH, pH, kh * dH);
        for (let kw = 0; kw < kW; kw++, row++) {
          const [w0, w1] = validRange(inW, outW, sW, pW, kw * dW);
          const base = row * N;
          if (d0 > 0 || d1 < outD || h0 > 0 || h1 < outH || w0 > 0 || w1 < outW) col.fill(0, base, base + N);
          for (let od = d0; od < d1; od++) {
            const id = od * sD - pD + kd * dD;
            for (let oh = h0; oh < h1; oh++) {
              const ih = oh * sH - pH + kh * dH;
              const src = xc + id * inPlane + ih * inW - pW + kw * dW;
              const dst = base + od * outPlane + oh * outW;
              copyRow(col, dst, x, src, w0, w1, sW);
            }
          }
        }
      }
    }
  }
}

/**
 * im2col laid out straight in a matrix kernel's tiles (see packBTiles in src/eval/gemm.ts): columns [j0, j0 + nc)
 * of the column matrix in tiles of nr columns, each tile k-major, so element (k, j) goes to
 * mem[at + t*K*nr + k*nr + l] with t = floor((j - j0) / nr), l = (j - j0) % nr; lanes past nc are 0. The values
 * im2col and then packing would give, without the column matrix in between.
 */
export function im2colTiles(x: NumArray, xOff: number, C: number, g: Geometry3, mem: Float32Array | Float64Array, at: number, j0: number, nc: number, nr: number): void {
  const { inD, inH, inW, outH, outW, kD, kH, kW, sD, sH, sW, dD, dH, dW, pD, pH, pW } = g;
  const outPlane = outH * outW, inPlane = inH * inW, inVol = inD * inPlane, kVol = kD * kH * kW;
  // Tile by tile, each written front to back: for the tile's columns, where each kernel offset reads within an
  // input channel (or -1 for padding and lanes past nc), then channel by channel through that table.
  const offs = new Int32Array(kVol * nr);
  let d = at;
  for (let t0 = 0; t0 < nc; t0 += nr) {
    for (let l = 0; l < nr; l++) {
      const j = j0 + t0 + l;
      const od = Math.floor(j / outPlane), oh = Math.floor((j % outPlane) / outW), ow = j % outW;
      let kk = 0;
      for (let kd = 0; kd < kD; kd++) {
        const id = od * sD - pD + kd * dD;
        for (let kh = 0; kh < kH; kh++) {
          const ih = oh * sH - pH + kh * dH;
          for (let kw = 0; kw < kW; kw++, kk++) {
            const iw = ow * sW - pW + kw * dW;
            const inside = t0 + l < nc && id >= 0 && id < inD && ih >= 0 && ih < inH && iw >= 0 && iw < inW;
            offs[kk * nr + l] = inside ? id * inPlane + ih * inW + iw : -1;
          }
        }
      }
    }
    for (let c = 0, xc = xOff; c < C; c++, xc += inVol) {
      for (let i = 0; i < offs.length; i++, d++) {
        const o = offs[i]!;
        mem[d] = o >= 0 ? x[xc + o]! : 0;
      }
    }
  }
}

/** Adjoint of im2col: add col (rows C*k, cols outD*outH*outW) into image y (C x inD x inH x inW at yOff). */
export function col2im(col: NumArray, C: number, g: Geometry3, y: NumArray, yOff: number): void {
  const { inD, inH, inW, outD, outH, outW, kD, kH, kW, sD, sH, sW, dD, dH, dW, pD, pH, pW } = g;
  const outPlane = outH * outW, N = outD * outPlane, inPlane = inH * inW, inVol = inD * inPlane;
  let row = 0;
  for (let c = 0; c < C; c++) {
    const yc = yOff + c * inVol;
    for (let kd = 0; kd < kD; kd++) {
      const [d0, d1] = validRange(inD, outD, sD, pD, kd * dD);
      for (let kh = 0; kh < kH; kh++) {
        const [h0, h1] = validRange(inH, outH, sH, pH, kh * dH);
        for (let kw = 0; kw < kW; kw++, row++) {
          const [w0, w1] = validRange(inW, outW, sW, pW, kw * dW);
          const base = row * N;
          for (let od = d0; od < d1; od++) {
            const id = od * sD - pD + kd * dD;
            for (let oh = h0; oh < h1; oh++) {
              const ih = oh * sH - pH + kh * dH;
              const dst = yc + id * inPlane + ih * inW - pW + kw * dW;
              const src = base + od * outPlane + oh * outW;
              for (let ow = w0; ow < w1; ow++) y[dst + ow * sW] += col[src + ow]!;
            }
          }
        }
      }
    }
  }
}
