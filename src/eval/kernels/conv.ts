// Conv (all opsets: 1-D/2-D/3-D, groups, strides, dilations, pads, auto_pad, optional bias).
// Grouped convolution with one input channel per group (depthwise, the MobileNet case) runs with the SIMD
// depthwise kernel for 1-D/2-D inputs (any stride and dilation), otherwise as direct loops over the output plane; everything else is im2col + blocked GEMM per group, skipping im2col for 1x1 stride-1
// unpadded kernels where the input already is the column matrix.
import { checkAllocation } from '../budget.js';
import { attrInt, attrInts, elementCount } from '../../graph/ir.js';
import { allocFloat, axis3, badModel, need, slidingWindow } from '../attrs.js';
import { gemm, memoryViews, rowMajor, simdOn } from '../gemm.js';
import { simdKernels } from '../wasm-gemm.js';
import { im2col, im2colTiles, type Geometry3 } from '../im2col.js';
import type { Kernel, KernelContext, NumArray, Value } from '../value.js';

let colBuf = new Float64Array(0);
let colBuf32 = new Float32Array(0);
let planeBuf = new Float64Array(0);

function scratch(n: number, which: 'col' | 'plane'): Float64Array {
  checkAllocation(n, 8);
  if (which === 'col') { if (colBuf.length < n) colBuf = new Float64Array(n); return colBuf; }
  if (planeBuf.length < n) planeBuf = new Float64Array(n);
  return planeBuf;
}

/** The im2col matrix in the input's element type (copies are exact), so GEMM copies its rows as they are. */
function colScratch(n: number, like: NumArray): NumArray {
  if (!(like instanceof Float32Array)) return scratch(n, 'col');
  checkAllocation(n, 4);
  if (colBuf32.length < n) colBuf32 = new Float32Array(n);
  return colBuf32;
}

export function geometry3(inSp: number[], outSp: number[], kernel: number[], strides: number[], dilations: number[], padBegin: number[]): Geometry3 {
  // (element by element: a padded copy of each list per call was most of what a small convolution allocated)
  return {
    inD: axis3(inSp, 0, 1), inH: axis3(inSp, 1, 1), inW: axis3(inSp, 2, 1),
    outD: axis3(outSp, 0, 1), outH: axis3(outSp, 1, 1), outW: axis3(outSp, 2, 1),
    kD: axis3(kernel, 0, 1), kH: axis3(kernel, 1, 1), kW: axis3(kernel, 2, 1),
    sD: axis3(strides, 0, 1), sH: axis3(strides, 1, 1), sW: axis3(strides, 2, 1),
    dD: axis3(dilations, 0, 1), dH: axis3(dilations, 1, 1), dW: axis3(dilations, 2, 1),
    pD: axis3(padBegin, 0, 0), pH: axis3(padBegin, 1, 0), pW: axis3(padBegin, 2, 0),
  };
}

/** [lo, hi) of output positions o with 0 <= o*s + shift < n. */
function span(n: number, outN: number, s: number, shift: number): [number, number] {
  const lo = shift >= 0 ? 0 : Math.min(outN, Math.ceil(-shift / s));
  const hi = Math.max(lo, Math.min(outN, Math.ceil((n - shift) / s)));
  return [lo, hi];
}

/**
 * One output channel of a single-input-channel convolution into out (outD*outH*outW, already holding the bias).
 * Works one output row at a time so the row being summed stays in L1; a 3-wide kernel row is applied as one
 * three-tap sum over the columns where all three taps are inside the input (the MobileNet 3x3 case).
 */
function directChannel(x: NumArray, xOff: number, w: NumArray, wOff: number, g: Geometry3, out: NumArray, oOff: number, row: Float64Array): void {
  const { inD, inH, inW, outD, outH, outW, kD, kH, kW, sD, sH, sW, dD, dH, dW, pD, pH, pW } = g;
  const inPlane = inH * inW, outPlane = outH * outW;
  // per kernel column: the output columns where that tap lands inside the input
  const wLo = new Int32Array(kW), wHi = new Int32Array(kW);
  for (let kw = 0; kw < kW; kw++) { const [a, b] = span(inW, outW, sW, kw * dW - pW); wLo[kw] = a; wHi[kw] = b; }
  const three = kW === 3;
  const lo3 = three ? Math.max(wLo[0]!, wLo[1]!, wLo[2]!) : 0, hi3 = three ? Math.min(wHi[0]!, wHi[1]!, wHi[2]!) : 0;
  for (let od = 0; od < outD; od++) {
    for (let oh = 0; oh < outH; oh++) {
      const o = oOff + od * outPlane + oh * outW;
      for (let ow = 0; ow < outW; ow++) row[ow] = out[o + ow]!;
      for (let kd = 0; kd < kD; kd++) {
        const id = od * sD - pD + kd * dD;
        if (id < 0 || id >= inD) continue;
        for (let kh = 0; kh < kH; kh++) {
          const ih = oh * sH - pH + kh * dH;
          if (ih < 0 || ih >= inH) continue;
          const wi = wOff + (kd * kH + kh) * kW;
          const base = xOff + id * inPlane + ih * inW - pW;
          if (three && lo3 < hi3) {
            const w0 = w[wi]!, w1 = w[wi + 1]!, w2 = w[wi + 2]!;
            const b1 = base + dW, b2 = base + 2 * dW;
            if (sW === 1) for (let ow = lo3; ow < hi3; ow++) row[ow] += w0 * x[base + ow]! + w1 * x[b1 + ow]! + w2 * x[b2 + ow]!;
            else for (let ow = lo3; ow < hi3; ow++) { const c = ow * sW; row[ow] += w0 * x[base + c]! + w1 * x[b1 + c]! + w2 * x[b2 + c]!; }
            // the border columns where some tap falls in the padding
            for (let kw = 0; kw < 3; kw++) {
              const wv = w[wi + kw]!, b = base + kw * dW;
              for (let ow = wLo[kw]!; ow < Math.min(lo3, wHi[kw]!); ow++) row[ow] += wv * x[b + ow * sW]!;
              for (let ow = Math.max(hi3, wLo[kw]!); ow < wHi[kw]!; ow++) row[ow] += wv * x[b + ow * sW]!;
            }
          } else {
            for (let kw = 0; kw < kW; kw++) {
              const wv = w[wi + kw]!, b = base + kw * dW, e = wHi[kw]!;
              if (sW === 1) for (let ow = wLo[kw]!; ow < e; ow++) row[ow] += wv * x[b + ow]!;
              else for (let ow = wLo[kw]!; ow < e; ow++) row[ow] += wv * x[b + ow * sW]!;
            }
          }
        }
      }
      for (let ow = 0; ow < outW; ow++) out[o + ow] = row[ow]!;
    }
  }
}

/** dst[d + i] = x[src + j] for j = lo, lo + s, ... < hi (one column phase of an input row). */
function gather(dst: NumArray, d: number, x: NumArray, src: number, lo: number, hi: number, s: number): void {
  for (let j = lo; j < hi; j += s) dst[d++] = x[src + j]!;
}

/**
 * 2-D depthwise convolution of every channel with the WebAssembly SIMD kernel: each input plane is copied into
 * module memory with its zero padding, the kernel sums the kH x kW taps (in row-major tap order, then adds the
 * bias) for a vector of outputs at a time, and the rows are copied into Y. With a column stride sW each padded
 * input row is stored as its sW column phases (padded column c at phase c % sW, index floor(c / sW)), so the tap
 * at column sW*ow + t of output column ow sits at index ow + floor(t / sW) of phase t % sW and a vector of
 * outputs reads consecutive elements. Returns false when SIMD is not available.
 */
function depthwiseSimd(x: NumArray, w: NumArray, B: Value | undefined, Y: NumArray, N: number, C: number, M: number, g: Geometry3): boolean {
  const simd = simdOn() ? simdKernels() : undefined;
  if (!simd) return false;
  const f64 = !(Y instanceof Float32Array);
  const es = f64 ? 8 : 4, lanes = 16 / es;
  const { inH, inW, outH, outW, kH, kW, sH, sW, dH, dW, pH, pW } = g;
  const outVecs = Math.ceil(outW / lanes), outRow = outVecs * lanes;
  const reach = (kW - 1) * dW;
  const phaseLen = outRow + Math.floor(reach / sW), inRow = sW * phaseLen;
  const rowsIn = (outH - 1) * sH + (kH - 1) * dH + 1;
  const kVol = kH * kW;
  // layout in elements, each part starting on 16 bytes: tap offsets (i32), weights, bias, padded input, output
  const al = (e: number) => Math.ceil(e / lanes) * lanes;
  const wE = al(Math.ceil((kVol * 4) / es)), biasE = wE + al(kVol), inE = biasE + lanes;
  const outE = inE + al(rowsIn * inRow), total = outE + outH * outRow;
  const views = memoryViews(simd, total * es);
  const mem = f64 ? views.f64 : views.f32;
  const tab = new Int32Array(mem.buffer, 0, kVol);
  for (let kh = 0; kh < kH; kh++) {
    for (let kw = 0; kw < kW; kw++) {
      const t = kw * dW;
      tab[kh * kW + kw] = (kh * dH * inRow + (t % sW) * phaseLen + Math.floor(t / sW)) * es;
    }
  }
  const kern = f64 ? simd.d64 : simd.d32;
  const Mg = M / C, inPlane = inH * inW, outPlane = outH * outW;
  // input columns j whose padded column j + pW lies inside a stored row
  const j0 = Math.max(0, -pW), j1 = Math.min(inW, inRow - pW);
  // every channel writes the same input positions, so the zero padding around them is laid down once
  mem.fill(0, inE, outE);
  for (let n = 0; n < N; n++) {
    for (let oc = 0; oc < M; oc++) {
      const xOff = (n * C + Math.floor(oc / Mg)) * inPlane;
      for (let i = 0; i < kVol; i++) mem[wE + i] = w[oc * kVol + i]!;
      mem[biasE] = B ? B.data[oc]! : 0;
      for (let ih = 0; ih < inH; ih++) {
        const r = ih + pH;
        if (r < 0 || r >= rowsIn) continue;
        const row = inE + r * inRow, src = xOff + ih * inW;
        if (sW === 1) {
          if (j1 - j0 >= 16) mem.set(x.subarray(src + j0, src + j1), row + pW + j0);
          else for (let j = j0; j < j1; j++) mem[row + pW + j] = x[src + j]!;
        } else {
          for (let ph = 0; ph < sW; ph++) {
            // the first input column at or after j0 whose padded column is in phase ph
            const jf = j0 + ((((ph - j0 - pW) % sW) + sW) % sW);
            gather(mem, row + ph * phaseLen + (jf + pW - ph) / sW, x, src, jf, j1, sW);
          }
        }
      }
      kern(inE * es, outE * es, wE * es, 0, kVol, outH, outVecs, sH * inRow * es, outRow * es, biasE * es);
      const yOff = (n * M + oc) * outPlane;
      if (outRow === outW) Y.set(mem.subarray(outE, outE + outPlane), yOff);
      else for (let oh = 0; oh < outH; oh++) Y.set(mem.subarray(outE + oh * outRow, outE + oh * outRow + outW), yOff + oh * outW);
    }
  }
  return true;
}

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const X = need(inputs, 0, ctx, 'X'), W = need(inputs, 1, ctx, 'W'), B = inputs[2];
  const rank = X.dims.length;
  if (rank < 3 || rank > 5) throw badModel(ctx, `input X has rank ${rank}; Conv needs N x C x 1 to 3 spatial axes`);
  if (W.dims.length !== rank) throw badModel(ctx, `weight W has rank ${W.dims.length}, input X has rank ${rank}`);
  const [N, C] = X.dims as [number, number];
  const M = W.dims[0]!, Cg = W.dims[1]!;
  const group = attrInt(ctx.node, 'group', 1);
  if (group < 1 || C !== Cg * group || M % group !== 0) {
    throw badModel(ctx, `channels do not match groups: X has ${C} channels, W is [${W.dims.join(',')}], group ${group}`);
  }
  const kernel = attrInts(ctx.node, 'kernel_shape') ?? W.dims.slice(2);
  for (let i = 0; i < kernel.length; i++) {
    if (kernel[i] !== W.dims[2 + i]) throw badModel(ctx, `kernel_shape [${kernel.join(',')}] does not match W dims [${W.dims.join(',')}]`);
  }
  if (B && (B.dims.length !== 1 || B.dims[0] !== M)) throw badModel(ctx, `bias has dims [${B.dims.join(',')}], expected [${M}]`);
  const inSp = X.dims.slice(2);
  const win = slidingWindow(ctx, inSp, kernel);
  const g3 = geometry3(inSp, win.out, kernel, win.strides, win.dilations, win.padBegin);
  const outVol = elementCount(win.out), inVol = elementCount(inSp), kVol = elementCount(kernel);
  const Mg = M / group, K = Cg * kVol;
  const Y = allocFloat(N * M * outVol, ctx.precision, false);
  const x = X.data, w = W.data;

  const simdDepthwise = Cg === 1 && g3.inD === 1 && g3.outD === 1 && g3.kD === 1 && g3.pD === 0;
  if (simdDepthwise && depthwiseSimd(x, w, B, Y, N, C, M, g3)) {
    // done
  } else if (Cg === 1) {
    const row = scratch(g3.outW, 'plane');
    for (let n = 0; n < N; n++) {
      for (let oc = 0; oc < M; oc++) {
        const yOff = (n * M + oc) * outVol;
        Y.fill(B ? B.data[oc]! : 0, yOff, yOff + outVol);
        directChannel(x, (n * C + Math.floor(oc / Mg)) * inVol, w, oc * kVol, g3, Y, yOff, row);
      }
    }
  } else {
    const pointwise = kVol === 1 && win.strides.every((s) => s === 1) && win.padBegin.every((p) => p === 0) && win.padEnd.every((p) => p === 0);
    const col = pointwise ? undefined : colScratch(K * outVol, x);
    for (let n = 0; n < N; n++) {
      for (let gi = 0; gi < group; gi++) {
        const xOff = (n * C + gi * Cg) * inVol;
        const yOff = (n * M + gi * Mg) * outVol;
        const A = rowMajor(w, gi * Mg * K, K);
        // the bias goes in first so the GEMM sum is rounded once (matters in float32 mode)
        if (B) for (let m = 0; m < Mg; m++) Y.fill(B.data[gi * Mg + m]!, yOff + m * outVol, yOff + (m + 1) * outVol);
        // the column matrix is made only for a path that reads it; the SIMD path gets it laid out in its tiles
        const colOp = col && {
          ...rowMajor(col, 0, outVol),
          fill: () => im2col(x, xOff, Cg, g3, col),
          tiles: (mem: Float32Array | Float64Array, at: number, j0: number, nc: number, nr: number) => im2colTiles(x, xOff, Cg, g3, mem, at, j0, nc, nr),
        };
        gemm(Mg, outVol, K, A, colOp || rowMajor(x, xOff, inVol), Y, yOff, outVol, !!B);
      }
    }
  }
  return [{ type: X.type, dims: [N, M, ...win.out], data: Y }];
}

export const Conv: Kernel = { op: 'Conv', domain: '', sinceVersion: 1, run };
