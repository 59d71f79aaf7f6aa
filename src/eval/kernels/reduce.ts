// Reductions: ReduceSum, ReduceMean, ReduceMax, ReduceMin, ReduceL2 (and ReduceL1, ReduceSumSquare,
// ReduceProd, ReduceLogSum, ReduceLogSumExp), plus ArgMax/ArgMin. Axes come from the `axes` attribute, or
// from the optional second input for ReduceSum at opset >= 13 and the others at opset >= 18; no axes means all
// axes, unless noop_with_empty_axes is set (input form only), which makes the op an identity.
import { attrInt, attrInts } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { DataType, alloc, elementCount, intList, isIntegerType, need, normAxis, stridesOf, wrapAll } from './common.js';

interface Reducer {
  init: number;
  step: (acc: number, x: number) => number;
  finish: (acc: number, count: number) => number;
}

const REDUCERS: Record<string, Reducer> = {
  ReduceSum: { init: 0, step: (a, x) => a + x, finish: (a) => a },
  ReduceMean: { init: 0, step: (a, x) => a + x, finish: (a, n) => a / n },
  ReduceMax: { init: -Infinity, step: (a, x) => (x > a || Number.isNaN(x) ? x : a), finish: (a) => a },
  ReduceMin: { init: Infinity, step: (a, x) => (x < a || Number.isNaN(x) ? x : a), finish: (a) => a },
  ReduceL2: { init: 0, step: (a, x) => a + x * x, finish: (a) => Math.sqrt(a) },
  ReduceL1: { init: 0, step: (a, x) => a + Math.abs(x), finish: (a) => a },
  ReduceSumSquare: { init: 0, step: (a, x) => a + x * x, finish: (a) => a },
  ReduceProd: { init: 1, step: (a, x) => a * x, finish: (a) => a },
  ReduceLogSum: { init: 0, step: (a, x) => a + x, finish: (a) => Math.log(a) },
  // plain exp-sum: exact in float64 for inputs below ~709, which covers every float32 logit that does not overflow exp in float32 either
  ReduceLogSumExp: { init: 0, step: (a, x) => a + Math.exp(x), finish: (a) => Math.log(a) },
};

/** Reduced axes (sorted, non-negative), or undefined when the op is a no-op. */
function axesOf(op: string, inputs: Array<Value | undefined>, rank: number, ctx: KernelContext): number[] | undefined {
  const inputForm = ctx.opset >= (op === 'ReduceSum' ? 13 : 18);
  const given = inputForm ? (inputs[1] ? intList(inputs[1]) : []) : attrInts(ctx.node, 'axes') ?? [];
  if (given.length === 0) {
    if (inputForm && attrInt(ctx.node, 'noop_with_empty_axes', 0) === 1) return undefined;
    return Array.from({ length: rank }, (_, i) => i);
  }
  return [...new Set(given.map((a) => normAxis(a, rank, ctx)))].sort((a, b) => a - b);
}

/** Output dims, and for each input axis the stride into the output (0 on reduced axes). */
function layout(dims: number[], axes: number[], keepdims: boolean): { outDims: number[]; dstStrides: number[] } {
  const kept = dims.map((d, i) => (axes.includes(i) ? 1 : d));
  const ks = stridesOf(kept);
  return {
    outDims: keepdims ? kept : dims.filter((_, i) => !axes.includes(i)),
    dstStrides: ks.map((s, i) => (axes.includes(i) ? 0 : s)),
  };
}

/** Walk every input element, calling visit(inputIndex, outputIndex, positionOnReducedAxes). */
function walk(dims: number[], dstStrides: number[], visit: (src: number, dst: number) => void): void {
  const n = elementCount(dims), rank = dims.length;
  const counter = new Array<number>(rank).fill(0);
  let dst = 0;
  for (let i = 0; i < n; i++) {
    visit(i, dst);
    for (let a = rank - 1; a >= 0; a--) {
      counter[a]!++;
      dst += dstStrides[a]!;
      if (counter[a]! < dims[a]!) break;
      dst -= dstStrides[a]! * counter[a]!;
      counter[a] = 0;
    }
  }
}

function reduceKernel(op: string): Kernel {
  const r = REDUCERS[op]!;
  return {
    op, domain: '', sinceVersion: 1,
    run(inputs, ctx) {
      const x = need(inputs, 0, ctx);
      const axes = axesOf(op, inputs, x.dims.length, ctx);
      if (!axes) return [x];
      const { outDims, dstStrides } = layout(x.dims, axes, attrInt(ctx.node, 'keepdims', 1) === 1);
      const m = elementCount(outDims);
      const acc = new Float64Array(m).fill(r.init);
      const src = x.data;
      walk(x.dims, dstStrides, (s, d) => { acc[d] = r.step(acc[d]!, src[s]!); });
      const count = m === 0 ? 0 : elementCount(x.dims) / m;
      const out = alloc(x.type, m, ctx);
      const integer = isIntegerType(x.type);
      for (let i = 0; i < m; i++) out[i] = integer ? Math.trunc(r.finish(acc[i]!, count)) : r.finish(acc[i]!, count);
      if (integer) wrapAll(x.type, out);
      return [{ type: x.type, dims: outDims, data: out }];
    },
  };
}

export const ReduceSum = reduceKernel('ReduceSum');
export const ReduceMean = reduceKernel('ReduceMean');
export const ReduceMax = reduceKernel('ReduceMax');
export const ReduceMin = reduceKernel('ReduceMin');
export const ReduceL2 = reduceKernel('ReduceL2');
export const ReduceL1 = reduceKernel('ReduceL1');
export const ReduceSumSquare = reduceKernel('ReduceSumSquare');
export const ReduceProd = reduceKernel('ReduceProd');
export const ReduceLogSum = reduceKernel('ReduceLogSum');
export const ReduceLogSumExp = reduceKernel('ReduceLogSumExp');

function argKernel(op: 'ArgMax' | 'ArgMin'): Kernel {
  const better = op === 'ArgMax' ? (x: number, best: number) => x > best : (x: number, best: number) => x < best;
  return {
    op, domain: '', sinceVersion: 1,
    run(inputs, ctx) {
      const x = need(inputs, 0, ctx);
      const axis = normAxis(attrInt(ctx.node, 'axis', 0), x.dims.length, ctx);
      const last = ctx.opset >= 12 && attrInt(ctx.node, 'select_last_index', 0) === 1;
      const { outDims, dstStrides } = layout(x.dims, [axis], attrInt(ctx.node, 'keepdims', 1) === 1);
      const m = elementCount(outDims);
      const best = new Float64Array(m), index = new Float64Array(m), seen = new Uint8Array(m);
      const inner = elementCount(x.dims.slice(axis + 1)), len = x.dims[axis]!;
      const src = x.data;
      walk(x.dims, dstStrides, (s, d) => {
        const k = Math.floor(s / inner) % len;
        const v = src[s]!;
        if (!seen[d] || better(v, best[d]!) || (last && v === best[d])) { best[d] = v; index[d] = k; seen[d] = 1; }
      });
      return [{ type: DataType.INT64, dims: outDims, data: index }];
    },
  };
}

export const ArgMax = argKernel('ArgMax');
export const ArgMin = argKernel('ArgMin');
