// Compress (opsets 9, 11 with negative axis): keeps the slices along `axis` whose entry in the 1-D bool
// `condition` is true; without an axis the input is flattened first. A condition shorter than the axis counts
// as false for the rest (ONNX Compress docs).
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need, normAxis } from './common.js';

export const Compress: Kernel = {
  op: 'Compress', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), cond = need(inputs, 1, ctx);
    const a = attrInt(ctx.node, 'axis');
    const dims = a === undefined ? [x.data.length] : x.dims;
    const axis = a === undefined ? 0 : normAxis(a, dims.length, ctx);
    const len = dims[axis]!;
    if (cond.data.length > len) throw badModel(ctx, `condition has ${cond.data.length} entries for an axis of length ${len}`);
    const keep: number[] = [];
    for (let i = 0; i < cond.data.length; i++) if (cond.data[i] !== 0) keep.push(i);
    const outer = elementCount(dims.slice(0, axis)), inner = elementCount(dims.slice(axis + 1));
    const outDims = [...dims];
    outDims[axis] = keep.length;
    const out = alloc(x.type, outer * keep.length * inner, ctx, false);
    let w = 0;
    for (let o = 0; o < outer; o++) {
      for (const k of keep) {
        const from = (o * len + k) * inner;
        out.set(x.data.subarray(from, from + inner), w);
        w += inner;
      }
    }
    return [{ type: x.type, dims: outDims, data: out }];
  },
};
