// im2col straight into the SIMD matrix kernel's tiles (src/eval/im2col.ts im2colTiles) against its definition:
// the column matrix im2col gives, laid out in tiles of nr columns, each tile k-major (element (k, j) at
// t*K*nr + k*nr + l for j = j0 + t*nr + l), lanes past the panel zero. Seeded 1-D, 2-D and 3-D geometries with
// strides, dilations and padding, panels starting mid-grid; then through gemm, where the tiles stand in for the
// packed column matrix: the products are the same bits.
import { describe, expect, it } from 'vitest';
import { im2col, im2colTiles, type Geometry3 } from '../../src/eval/im2col.js';
import { gemm, rowMajor, setSimd, simdOn } from '../../src/eval/gemm.js';
import { randn, rng } from '../helpers/build.js';

function geometry(r: () => number, dims: number): Geometry3 {
  const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
  const axis = (on: boolean) => {
    if (!on) return { n: 1, k: 1, s: 1, d: 1, p: 0, out: 1 };
    const k = pick(1, 3), s = pick(1, 2), d = pick(1, 2), p = pick(0, 2), n = pick(k + d, 9);
    const out = Math.floor((n + 2 * p - d * (k - 1) - 1) / s) + 1;
    return { n, k, s, d, p, out };
  };
  const [D, H, W] = [axis(dims >= 3), axis(dims >= 2), axis(true)];
  return {
    inD: D.n, inH: H.n, inW: W.n, outD: D.out, outH: H.out, outW: W.out, kD: D.k, kH: H.k, kW: W.k,
    sD: D.s, sH: H.s, sW: W.s, dD: D.d, dH: H.d, dW: W.d, pD: D.p, pH: H.p, pW: W.p,
  };
}

describe('im2col into kernel tiles', () => {
  it('lays out the column matrix as the tiles define it, every slot written', () => {
    const r = rng(21);
    for (let trial = 0; trial < 60; trial++) {
      const g = geometry(r, 1 + (trial % 3)), C = 1 + Math.floor(r() * 5), nr = trial % 2 ? 4 : 8;
      const K = C * g.kD * g.kH * g.kW, N = g.outD * g.outH * g.outW;
      const x = Float64Array.from(randn(r, C * g.inD * g.inH * g.inW + 3, 1));
      const xOff = trial % 4 === 0 ? 3 : 0;
      const col = new Float64Array(K * N);
      im2col(x, xOff, C, g, col);
      const j0 = Math.floor(r() * N), nc = 1 + Math.floor(r() * (N - j0));
      const tiles = Math.ceil(nc / nr), at = 5;
      const mem = new Float64Array(at + tiles * K * nr + 4).fill(NaN);
      im2colTiles(x, xOff, C, g, mem, at, j0, nc, nr);
      const want = new Float64Array(mem.length).fill(NaN);
      for (let t = 0; t < tiles; t++) for (let k = 0; k < K; k++) for (let l = 0; l < nr; l++) {
        const j = t * nr + l;
        want[at + t * K * nr + k * nr + l] = j < nc ? col[k * N + j0 + j]! : 0;
      }
      expect(Array.from(mem), `trial ${trial} ${JSON.stringify(g)} C=${C} nr=${nr} j0=${j0} nc=${nc}`).toEqual(Array.from(want));
    }
  });

  it('gemm with the tiles in place of the packed column matrix gives the same bits, float32 and float64', () => {
    expect(simdOn()).toBe(true);
    const r = rng(22);
    for (let trial = 0; trial < 12; trial++) {
      const g = geometry(r, 2 + (trial % 2));
      // some grids past one 512-column panel
      if (trial % 4 === 3) Object.assign(g, { inH: 30, inW: 30, outH: 30, outW: 30, kH: 3, kW: 3, sH: 1, sW: 1, dH: 1, dW: 1, pH: 1, pW: 1, inD: 1, outD: 1, kD: 1, pD: 0 });
      const C = 2 + Math.floor(r() * 12), M = 5 + Math.floor(r() * 40);
      const K = C * g.kD * g.kH * g.kW, N = g.outD * g.outH * g.outW;
      for (const f32 of [false, true]) {
        const x = f32 ? Float32Array.from(randn(r, C * g.inD * g.inH * g.inW, 1)) : Float64Array.from(randn(r, C * g.inD * g.inH * g.inW, 1));
        // float32 weights in a float64 product too (the kernel widens them tile by tile)
        const w = f32 || trial % 3 === 0 ? Float32Array.from(randn(r, M * K, 1)) : Float64Array.from(randn(r, M * K, 1));
        const col = f32 ? new Float32Array(K * N) : new Float64Array(K * N);
        im2col(x, 0, C, g, col);
        const C1 = f32 ? new Float32Array(M * N) : new Float64Array(M * N), C2 = C1.slice();
        gemm(M, N, K, rowMajor(w, 0, K), rowMajor(col, 0, N), C1, 0, N, false);
        const lazy = { ...rowMajor(new Float64Array(0), 0, N), fill: () => { throw new Error('the SIMD path should not need the column matrix'); }, tiles: (mem: Float32Array | Float64Array, at: number, j0: number, nc: number, nr: number) => im2colTiles(x, 0, C, g, mem, at, j0, nc, nr) };
        if (M * N * K >= 512) gemm(M, N, K, rowMajor(w, 0, K), lazy, C2, 0, N, false);
        else C2.set(C1);
        expect(Buffer.from(C2.buffer).equals(Buffer.from(C1.buffer)), `trial ${trial} f32 ${f32} M=${M} N=${N} K=${K}`).toBe(true);
      }
    }
  });

  it('a path without the kernel tiles makes the column matrix first (fill), with the same result', () => {
    const r = rng(23);
    const g = geometry(r, 2), C = 6, M = 9;
    const K = C * g.kD * g.kH * g.kW, N = g.outD * g.outH * g.outW;
    const x = Float64Array.from(randn(r, C * g.inD * g.inH * g.inW, 1)), w = Float64Array.from(randn(r, M * K, 1));
    const col = new Float64Array(K * N), C1 = new Float64Array(M * N), C2 = new Float64Array(M * N);
    setSimd(false);
    try {
      im2col(x, 0, C, g, col);
      gemm(M, N, K, rowMajor(w, 0, K), rowMajor(col, 0, N), C1, 0, N, false);
      const made = new Float64Array(K * N);
      let fills = 0;
      const lazy = { ...rowMajor(made, 0, N), fill: () => { fills++; im2col(x, 0, C, g, made); }, tiles: () => { throw new Error('no tiles without SIMD'); } };
      gemm(M, N, K, rowMajor(w, 0, K), lazy, C2, 0, N, false);
      expect(fills).toBe(1);
      expect(Buffer.from(C2.buffer).equals(Buffer.from(C1.buffer))).toBe(true);
    } finally {
      setSimd(true);
    }
  });
});
