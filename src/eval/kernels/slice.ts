// Slice: starts/ends/axes are attributes before opset 10; from 10 they are inputs, with optional steps
// (negative steps walk backwards). Out-of-range starts and ends are clamped as the ONNX operator docs specify.
import { attrInts } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, badModel, elementCount, intList, need, normAxis, stridesOf } from './common.js';

interface SliceArgs { starts: number[]; ends: number[]; axes?: number[]; steps?: number[] }

function argsOf(inputs: Array<Value | undefined>, ctx: KernelContext): SliceArgs {
  if (ctx.opset < 10) {
    const starts = attrInts(ctx.node, 'starts'), ends = attrInts(ctx.node, 'ends');
    if (!starts || !ends) throw badModel(ctx, 'starts and ends attributes are required');
    return { starts, ends, axes: attrInts(ctx.node, 'axes') };
  }
  return {
    starts: intList(need(inputs, 1, ctx)),
    ends: intList(need(inputs, 2, ctx)),
    axes: inputs[3] ? intList(inputs[3]) : undefined,
    steps: inputs[4] ? intList(inputs[4]) : undefined,
  };
}

export const Slice: Kernel = {
  op: 'Slice', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const rank = x.dims.length;
    const { starts, ends, axes, steps } = argsOf(inputs, ctx);
    const begin = new Array<number>(rank).fill(0);
    const step = new Array<number>(rank).fill(1);
    const dims = [...x.dims];
    for (let k = 0; k < starts.length; k++) {
      const axis = normAxis(axes ? axes[k]! : k, rank, ctx);
      const dim = x.dims[axis]!;
      const s = steps ? steps[k]! : 1;
      if (s === 0) throw badModel(ctx, 'a step of 0 is not allowed');
      let b = starts[k]!, e = ends[k]!;
      if (b < 0) b += dim;
      if (e < 0) e += dim;
      if (s > 0) {
        b = Math.min(Math.max(b, 0), dim);
        e = Math.min(Math.max(e, 0), dim);
        dims[axis] = Math.max(0, Math.ceil((e - b) / s));
      } else {
        b = Math.min(Math.max(b, 0), dim - 1);
        e = Math.min(Math.max(e, -1), dim - 1);
        dims[axis] = Math.max(0, Math.ceil((b - e) / -s));
      }
      begin[axis] = b;
      step[axis] = s;
    }
    const n = elementCount(dims);
    const out = alloc(x.type, n, ctx);
    const inStrides = stridesOf(x.dims);
    let base = 0;
    for (let a = 0; a < rank; a++) base += begin[a]! * inStrides[a]!;
    const st = inStrides.map((s, a) => s * step[a]!);
    const counter = new Array<number>(rank).fill(0);
    let src = base;
    for (let o = 0; o < n; o++) {
      out[o] = x.data[src]!;
      for (let a = rank - 1; a >= 0; a--) {
        counter[a]!++;
        src += st[a]!;
        if (counter[a]! < dims[a]!) break;
        src -= st[a]! * counter[a]!;
        counter[a] = 0;
      }
    }
    return [{ type: x.type, dims, data: out }];
  },
};
