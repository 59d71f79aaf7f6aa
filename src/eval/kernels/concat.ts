// Concat and Split along one axis. A tensor is viewed as [outer, dims[axis] * inner] rows, so both are
// block copies of contiguous runs.
import { attrInt, attrInts } from '../../graph/ir.js';
import type { Kernel, Value } from '../value.js';
import { alloc, badModel, elementCount, intList, normAxis } from './common.js';

export const Concat: Kernel = {
  op: 'Concat', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const parts = inputs.filter((v): v is Value => v !== undefined);
    if (parts.length === 0) throw badModel(ctx, 'no inputs');
    const first = parts[0]!;
    const rank = first.dims.length;
    // opset 1 defaults axis to 1; from opset 4 it is required
    const axis = normAxis(attrInt(ctx.node, 'axis', 1), rank, ctx);
    for (const p of parts) {
      if (p.dims.length !== rank || p.dims.some((d, i) => i !== axis && d !== first.dims[i])) {
        throw badModel(ctx, `cannot concatenate shapes [${first.dims}] and [${p.dims}] on axis ${axis}`);
      }
    }
    const dims = [...first.dims];
    dims[axis] = parts.reduce((s, p) => s + p.dims[axis]!, 0);
    const outer = elementCount(first.dims.slice(0, axis));
    const inner = elementCount(first.dims.slice(axis + 1));
    const rowOut = dims[axis]! * inner;
    const out = alloc(first.type, elementCount(dims), ctx);
    let offset = 0;
    for (const p of parts) {
      const row = p.dims[axis]! * inner;
      for (let o = 0; o < outer; o++) out.set(p.data.subarray(o * row, (o + 1) * row), o * rowOut + offset);
      offset += row;
    }
    return [{ type: first.type, dims, data: out }];
  },
};

export const Split: Kernel = {
  op: 'Split', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = inputs[0];
    if (!x) throw badModel(ctx, 'required input 0 is missing');
    const rank = x.dims.length;
    const axis = normAxis(attrInt(ctx.node, 'axis', 0), rank, ctx);
    const len = x.dims[axis]!;
    const count = ctx.node.outputs.length;
    let sizes: number[] | undefined;
    if (ctx.opset >= 13) sizes = inputs[1] ? intList(inputs[1]) : undefined;
    else sizes = attrInts(ctx.node, 'split') ?? (ctx.opset < 2 && inputs[1] ? intList(inputs[1]) : undefined);
    if (!sizes) {
      const n = ctx.opset >= 18 ? attrInt(ctx.node, 'num_outputs', count) : count;
      // opset 18 allows an uneven split: every chunk has ceil(len/n) elements except a smaller last one
      const chunk = ctx.opset >= 18 ? Math.ceil(len / n) : len / n;
      if (!Number.isInteger(chunk)) throw badModel(ctx, `axis ${axis} of length ${len} does not split into ${n} equal parts`);
      sizes = Array.from({ length: n }, (_, i) => Math.max(0, Math.min(chunk, len - i * chunk)));
    }
    if (sizes.reduce((a, b) => a + b, 0) !== len || sizes.some((s) => s < 0)) {
      throw badModel(ctx, `split sizes [${sizes}] do not add up to ${len}`);
    }
    const outer = elementCount(x.dims.slice(0, axis));
    const inner = elementCount(x.dims.slice(axis + 1));
    const results: Value[] = [];
    let start = 0;
    for (const s of sizes) {
      const dims = [...x.dims];
      dims[axis] = s;
      const out = alloc(x.type, outer * s * inner, ctx);
      for (let o = 0; o < outer; o++) {
        const from = (o * len + start) * inner;
        out.set(x.data.subarray(from, from + s * inner), o * s * inner);
      }
      results.push({ type: x.type, dims, data: out });
      start += s;
    }
    return results;
  },
};
