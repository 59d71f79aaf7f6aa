// Resize (opsets 10, 11, 13, 18, 19) and Upsample (opset 7 attribute scales, opset 9 input scales).
//
// Each output coordinate is mapped back to the input by coordinate_transformation_mode, then interpolated
// (nearest with its rounding mode, linear, cubic). Linear and cubic interpolation are products of per-axis
// weights, so the tensor is resized one axis at a time with per-axis tap tables; this equals the n-linear /
// n-cubic formula of the operator docs. Opset 10 Resize and Upsample use the older rules: asymmetric
// coordinates and nearest = truncate when enlarging, ceil when shrinking (as onnxruntime does for them).
import { checkAllocation } from '../budget.js';
import { attrFloat, attrFloats, attrInt, attrInts, attrString, elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, need, normAxis, unsupported } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';

interface Plan {
  outDims: number[];
  scales: number[];
  mode: string;
  ctm: string;
  nearest: string;
  cubicA: number;
  exclude: boolean;
  extrapolation: number;
  roi?: number[];
}

function sourceCoord(o: number, n: number, m: number, s: number, ctm: string, roiStart: number, roiEnd: number, ctx: KernelContext): number {
  switch (ctm) {
    case 'half_pixel': return (o + 0.5) / s - 0.5;
    case 'half_pixel_symmetric': {
      const adj = m / (s * n), center = n / 2;
      return center * (1 - adj) + (o + 0.5) / s - 0.5;
    }
    case 'pytorch_half_pixel': return m > 1 ? (o + 0.5) / s - 0.5 : 0;
    // the resized length is n * scale before rounding, as in the ONNX reference implementation that produced
    // the backend cases (onnxruntime uses the rounded length m; the two agree when n * scale is whole)
    case 'align_corners': return m === 1 || n * s === 1 ? 0 : (o * (n - 1)) / (n * s - 1);
    case 'asymmetric': return o / s;
    // Resize-11/13 (dropped from the Resize-18 doc; onnxruntime still runs it at 18 and 19, and so does pleat).
    // An axis of scale 1 stays as it is, as onnxruntime leaves it, where the formula alone would shift it by half
    // a pixel (the other modes map such an axis onto itself anyway).
    case 'tf_half_pixel_for_nn': return s === 1 ? o : (o + 0.5) / s;
    case 'tf_crop_and_resize':
      return m > 1 ? roiStart * (n - 1) + (o * (roiEnd - roiStart) * (n - 1)) / (m - 1) : 0.5 * (roiStart + roiEnd) * (n - 1);
    default: throw unsupported(ctx, `coordinate_transformation_mode '${ctm}'`);
  }
}

function nearestIndex(x: number, mode: string, down: boolean, ctx: KernelContext): number {
  switch (mode) {
    case 'round_prefer_floor': return x === Math.floor(x) + 0.5 ? Math.floor(x) : Math.round(x);
    case 'round_prefer_ceil': return x === Math.floor(x) + 0.5 ? Math.ceil(x) : Math.round(x);
    case 'floor': return Math.floor(x);
    case 'ceil': return Math.ceil(x);
    case 'simple': return down ? Math.ceil(x) : Math.trunc(x);
    default: throw unsupported(ctx, `nearest_mode '${mode}'`);
  }
}

/** Keys cubic convolution weights for the four taps floor(x)-1 .. floor(x)+2 at fraction t. */
function cubicWeights(t: number, A: number): [number, number, number, number] {
  const w = (d: number): number => {
    const a = Math.abs(d);
    if (a <= 1) return ((A + 2) * a - (A + 3)) * a * a + 1;
    if (a < 2) return ((A * a - 5 * A) * a + 8 * A) * a - 4 * A;
    return 0;
  };
  return [w(t + 1), w(t), w(1 - t), w(2 - t)];
}

interface Taps { count: number; idx: Int32Array; w: Float64Array; outside: Uint8Array }

function axisTaps(axis: number, n: number, plan: Plan, ctx: KernelContext): Taps {
  const m = plan.outDims[axis]!, s = plan.scales[axis]!, r = plan.outDims.length;
  const count = plan.mode === 'nearest' ? 1 : plan.mode === 'linear' ? 2 : 4;
  checkAllocation(m * count, 13); // index, weight and flag per tap, before allocating them
  const idx = new Int32Array(m * count), w = new Float64Array(m * count), outside = new Uint8Array(m);
  const roiStart = plan.roi ? plan.roi[axis]! : 0, roiEnd = plan.roi ? plan.roi[r + axis]! : 1;
  for (let o = 0; o < m; o++) {
    const x = sourceCoord(o, n, m, s, plan.ctm, roiStart, roiEnd, ctx);
    if (plan.ctm === 'tf_crop_and_resize' && (x < 0 || x > n - 1)) outside[o] = 1;
    const b = o * count;
    if (plan.mode === 'nearest') {
      idx[b] = Math.min(n - 1, Math.max(0, nearestIndex(x, plan.nearest, s < 1, ctx)));
      w[b] = 1;
    } else if (plan.mode === 'linear') {
      const xc = Math.min(n - 1, Math.max(0, x));
      const i0 = Math.floor(xc), i1 = Math.min(i0 + 1, n - 1), f = xc - i0;
      idx[b] = i0; idx[b + 1] = i1; w[b] = 1 - f; w[b + 1] = f;
    } else {
      const i0 = Math.floor(x);
      const ws = cubicWeights(x - i0, plan.cubicA);
      let sum = 0;
      for (let t = 0; t < 4; t++) {
        const i = i0 - 1 + t;
        if (plan.exclude && (i < 0 || i >= n)) ws[t] = 0;
        sum += ws[t]!;
        idx[b + t] = Math.min(n - 1, Math.max(0, i));
      }
      for (let t = 0; t < 4; t++) w[b + t] = plan.exclude ? ws[t]! / sum : ws[t]!;
    }
  }
  return { count, idx, w, outside };
}

function resize(X: Value, plan: Plan, ctx: KernelContext): Value {
  const r = X.dims.length;
  let cur = X.data as ArrayLike<number>;
  let dims = [...X.dims];
  const outsideMaps: Array<Uint8Array | undefined> = [];
  for (let ax = 0; ax < r; ax++) {
    const n = dims[ax]!, m = plan.outDims[ax]!;
    const taps = axisTaps(ax, n, plan, ctx);
    outsideMaps.push(plan.ctm === 'tf_crop_and_resize' ? taps.outside : undefined);
    // an axis the mapping leaves unchanged needs no pass
    if (m === n && taps.count === 1 && taps.idx.every((v, i) => v === i)) continue;
    if (m === n && taps.count > 1 && taps.idx.every((v, i) => (i % taps.count === 0 ? v === i / taps.count : true)) && taps.w.every((v, i) => (i % taps.count === 0 ? v === 1 : v === 0))) continue;
    const outer = elementCount(dims.slice(0, ax)), inner = elementCount(dims.slice(ax + 1));
    checkAllocation(outer * m * inner, 8);
    const next = new Float64Array(outer * m * inner);
    const T = taps.count, ti = taps.idx, tw = taps.w;
    for (let p = 0; p < outer; p++) {
      for (let o = 0; o < m; o++) {
        const dst = (p * m + o) * inner;
        for (let t = 0; t < T; t++) {
          const wt = tw[o * T + t]!;
          if (wt === 0 && T > 1) continue;
          const src = (p * n + ti[o * T + t]!) * inner;
          for (let j = 0; j < inner; j++) next[dst + j] += wt * cur[src + j]!;
        }
      }
    }
    cur = next;
    dims = [...dims.slice(0, ax), m, ...dims.slice(ax + 1)];
  }
  const total = elementCount(plan.outDims);
  const Y = allocFloat(total, ctx.precision, false);
  for (let i = 0; i < total; i++) Y[i] = cur[i]!;
  if (outsideMaps.some((m) => m && m.some((v) => v))) {
    // tf_crop_and_resize: any output whose source lies outside the input on some axis is extrapolation_value
    const counter = new Array<number>(r).fill(0);
    for (let i = 0; i < total; i++) {
      if (outsideMaps.some((m, ax) => m && m[counter[ax]!])) Y[i] = plan.extrapolation;
      for (let ax = r - 1; ax >= 0; ax--) { if (++counter[ax]! < plan.outDims[ax]!) break; counter[ax] = 0; }
    }
  }
  return { type: X.type, dims: [...plan.outDims], data: Y };
}

/** Output size for a scale, computed in float32 as onnxruntime does (so 0.7f * 10 gives 7, not 6). */
function scaledSize(n: number, s: number): number {
  return Math.floor(Math.fround(n * Math.fround(s)));
}

function checkMode(mode: string, ctx: KernelContext, allowCubic: boolean): string {
  const m = mode === 'bilinear' || mode === 'trilinear' ? 'linear' : mode;
  if (m !== 'nearest' && m !== 'linear' && !(allowCubic && m === 'cubic')) throw unsupported(ctx, `mode '${mode}'`);
  return m;
}

function legacyPlan(X: Value, scales: number[], ctx: KernelContext): Plan {
  if (scales.length !== X.dims.length) throw badModel(ctx, `scales has ${scales.length} values for a rank-${X.dims.length} input`);
  if (scales.some((s) => !(s > 0))) throw badModel(ctx, 'scales must be positive');
  const mode = checkMode(attrString(ctx.node, 'mode', 'nearest'), ctx, false);
  return {
    outDims: X.dims.map((n, i) => scaledSize(n, scales[i]!)), scales, mode, ctm: 'asymmetric', nearest: 'simple',
    cubicA: -0.75, exclude: false, extrapolation: 0,
  };
}

export const Resize10: Kernel = {
  op: 'Resize', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X'), S = need(inputs, 1, ctx, 'scales');
    return [resize(X, legacyPlan(X, Array.from(S.data), ctx), ctx)];
  },
};

export const Resize11: Kernel = {
  op: 'Resize', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X');
    const roiV = inputs[1], scalesV = inputs[2], sizesV = inputs[3];
    const r = X.dims.length;
    const mode = checkMode(attrString(ctx.node, 'mode', 'nearest'), ctx, true);
    const ctm = attrString(ctx.node, 'coordinate_transformation_mode', 'half_pixel');
    if (ctm === 'half_pixel_symmetric' && ctx.opset < 19) throw unsupported(ctx, "coordinate_transformation_mode 'half_pixel_symmetric' before opset 19");
    const axesAttr = ctx.opset >= 18 ? attrInts(ctx.node, 'axes') : undefined;
    const axes = axesAttr ? axesAttr.map((a) => normAxis(ctx, a, r)) : Array.from({ length: r }, (_, i) => i);
    const hasScales = !!scalesV && scalesV.data.length > 0, hasSizes = !!sizesV && sizesV.data.length > 0;
    if (hasScales === hasSizes) throw badModel(ctx, 'exactly one of scales and sizes must be given');
    const scales = new Array<number>(r).fill(1), outDims = [...X.dims];
    if (hasScales) {
      if (scalesV!.data.length !== axes.length) throw badModel(ctx, `scales has ${scalesV!.data.length} values for ${axes.length} axes`);
      axes.forEach((ax, i) => {
        const s = scalesV!.data[i]!;
        if (!(s > 0)) throw badModel(ctx, 'scales must be positive');
        scales[ax] = s; outDims[ax] = scaledSize(X.dims[ax]!, s);
      });
    } else {
      if (sizesV!.data.length !== axes.length) throw badModel(ctx, `sizes has ${sizesV!.data.length} values for ${axes.length} axes`);
      const policy = ctx.opset >= 18 ? attrString(ctx.node, 'keep_aspect_ratio_policy', 'stretch') : 'stretch';
      if (policy === 'stretch') {
        axes.forEach((ax, i) => { outDims[ax] = sizesV!.data[i]!; scales[ax] = outDims[ax]! / X.dims[ax]!; });
      } else if (policy === 'not_larger' || policy === 'not_smaller') {
        const ratios = axes.map((ax, i) => sizesV!.data[i]! / X.dims[ax]!);
        const s = policy === 'not_larger' ? Math.min(...ratios) : Math.max(...ratios);
        axes.forEach((ax) => { scales[ax] = s; outDims[ax] = Math.round(s * X.dims[ax]!); });
      } else throw unsupported(ctx, `keep_aspect_ratio_policy '${policy}'`);
    }
    if (ctx.opset >= 18 && attrInt(ctx.node, 'antialias', 0) !== 0 && mode !== 'nearest' && scales.some((s) => s < 1)) {
      throw unsupported(ctx, 'antialias=1 when downsampling');
    }
    let roi: number[] | undefined;
    if (ctm === 'tf_crop_and_resize') {
      if (!roiV || roiV.data.length === 0) throw badModel(ctx, 'tf_crop_and_resize needs the roi input');
      const given = Array.from(roiV.data);
      if (given.length === 2 * r) roi = given;
      else if (given.length === 2 * axes.length) {
        roi = [...new Array(r).fill(0), ...new Array(r).fill(1)];
        axes.forEach((ax, i) => { roi![ax] = given[i]!; roi![r + ax] = given[axes.length + i]!; });
      } else throw badModel(ctx, `roi has ${given.length} values`);
    }
    const plan: Plan = {
      outDims, scales, mode, ctm,
      nearest: attrString(ctx.node, 'nearest_mode', 'round_prefer_floor'),
      cubicA: attrFloat(ctx.node, 'cubic_coeff_a', -0.75),
      exclude: attrInt(ctx.node, 'exclude_outside', 0) !== 0,
      extrapolation: attrFloat(ctx.node, 'extrapolation_value', 0),
      roi,
    };
    return [resize(X, plan, ctx)];
  },
};

export const Upsample7: Kernel = {
  op: 'Upsample', domain: '', sinceVersion: 7,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X');
    const scales = attrFloats(ctx.node, 'scales');
    if (!scales) throw badModel(ctx, 'attribute scales is required');
    return [resize(X, legacyPlan(X, scales, ctx), ctx)];
  },
};

export const Upsample9: Kernel = {
  op: 'Upsample', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X'), S = need(inputs, 1, ctx, 'scales');
    return [resize(X, legacyPlan(X, Array.from(S.data), ctx), ctx)];
  },
};
