// Pad: constant, reflect, edge (and wrap at opset 19). Opsets 1-10 take pads/mode/value as attributes
// (opset 1 calls them 'paddings'); from 11 pads and constant_value are inputs, from 18 an optional axes input
// selects the padded axes. Negative pads crop. Each output axis is mapped to its source index once, then rows
// are copied through the maps.
import { checkAllocation } from '../budget.js';
import { attr, attrFloat, attrInts, attrString, elementCount } from '../../graph/ir.js';
import { badModel, need, normAxis, unsupported } from '../attrs.js';
import type { Kernel, KernelContext, NumArray, Value } from '../value.js';
import { isFloatType } from '../../graph/tensor.js';

/** Source index along one axis for each output index (-1: take the constant). */
function axisMap(n: number, pb: number, pe: number, mode: string, ctx: KernelContext): Int32Array {
  const out = n + pb + pe;
  if (out < 0) throw badModel(ctx, `pads ${pb}/${pe} crop more than the axis size ${n}`);
  const map = new Int32Array(out);
  for (let o = 0; o < out; o++) {
    let i = o - pb;
    if (i < 0 || i >= n) {
      if (n === 0) { if (mode !== 'constant') throw badModel(ctx, `mode '${mode}' cannot pad an empty axis`); i = -1; }
      else if (mode === 'constant') i = -1;
      else if (mode === 'edge') i = i < 0 ? 0 : n - 1;
      else if (mode === 'wrap') i = ((i % n) + n) % n;
      else if (mode === 'reflect') {
        if (n === 1) i = 0;
        else {
          const period = 2 * (n - 1);
          i = ((i % period) + period) % period;
          if (i >= n) i = period - i;
        }
      } else throw unsupported(ctx, `mode '${mode}'`);
    }
    map[o] = i;
  }
  return map;
}

export function padValue(X: Value, pads: number[], mode: string, value: number, ctx: KernelContext, alloc: (n: number) => NumArray): Value {
  const r = X.dims.length;
  if (pads.length !== 2 * r) throw badModel(ctx, `pads has ${pads.length} values for a rank-${r} input (need ${2 * r})`);
  // the output's size first: pads of 2^62 must be refused before any map or buffer is made
  for (let i = 0; i < r; i++) checkAllocation(X.dims[i]! + pads[i]! + pads[r + i]!, 4);
  checkAllocation(elementCount(X.dims.map((n, i) => Math.max(0, n + pads[i]! + pads[r + i]!))), 8);
  const maps = X.dims.map((n, i) => axisMap(n, pads[i]!, pads[r + i]!, mode, ctx));
  const dims = maps.map((m) => m.length);
  const total = elementCount(dims);
  const Y = alloc(total);
  if (r === 0) { Y[0] = X.data[0]!; return { type: X.type, dims, data: Y }; }
  const x = X.data;
  const strides = new Array<number>(r).fill(1);
  for (let i = r - 2; i >= 0; i--) strides[i] = strides[i + 1]! * X.dims[i + 1]!;
  const inner = dims[r - 1]!, last = maps[r - 1]!;
  const counter = new Array<number>(r).fill(0);
  for (let o = 0; o < total; o += inner) {
    let base = 0, outside = false;
    for (let ax = 0; ax < r - 1; ax++) {
      const s = maps[ax]![counter[ax]!]!;
      if (s < 0) { outside = true; break; }
      base += s * strides[ax]!;
    }
    if (outside) Y.fill(value, o, o + inner);
    else for (let j = 0; j < inner; j++) { const s = last[j]!; Y[o + j] = s < 0 ? value : x[base + s]!; }
    for (let ax = r - 2; ax >= 0; ax--) {
      if (++counter[ax]! < dims[ax]!) break;
      counter[ax] = 0;
    }
  }
  return { type: X.type, dims, data: Y };
}

function allocFor(X: Value, ctx: KernelContext): (n: number) => NumArray {
  return (n) => (isFloatType(X.type) && ctx.precision === 'float32' ? new Float32Array(n) : new Float64Array(n));
}

export const PadV1: Kernel = {
  op: 'Pad', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'data');
    const pads = attrInts(ctx.node, ctx.opset < 2 ? 'paddings' : 'pads') ?? attrInts(ctx.node, 'pads');
    if (!pads) throw badModel(ctx, 'attribute pads is required');
    const mode = attrString(ctx.node, 'mode', 'constant');
    if (mode === 'wrap') throw unsupported(ctx, "mode 'wrap'");
    return [padValue(X, pads, mode, attrFloat(ctx.node, 'value', 0), ctx, allocFor(X, ctx))];
  },
};

export const PadV11: Kernel = {
  op: 'Pad', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'data'), P = need(inputs, 1, ctx, 'pads');
    const mode = attrString(ctx.node, 'mode', 'constant');
    if (mode === 'wrap' && ctx.opset < 19) throw unsupported(ctx, "mode 'wrap' before opset 19");
    if (attr(ctx.node, 'pads')) throw badModel(ctx, 'pads is an input from opset 11, not an attribute');
    const cv = inputs[2];
    const value = cv && cv.data.length > 0 ? cv.data[0]! : 0;
    const r = X.dims.length;
    let pads = Array.from(P.data);
    const A = ctx.opset >= 18 ? inputs[3] : undefined;
    if (A) {
      const axes = Array.from(A.data, (a) => normAxis(ctx, a, r));
      if (pads.length !== 2 * axes.length) throw badModel(ctx, `pads has ${pads.length} values for ${axes.length} axes`);
      const full = new Array<number>(2 * r).fill(0);
      axes.forEach((ax, i) => { full[ax] = pads[i]!; full[r + ax] = pads[axes.length + i]!; });
      pads = full;
    }
    return [padValue(X, pads, mode, value, ctx, allocFor(X, ctx))];
  },
};
