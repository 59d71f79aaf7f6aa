// Shape, Size, ConstantOfShape and Range: values made from shapes and scalars. Shapes and counts are INT64.
import { attrInt, attrTensor } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { DataType, alloc, badModel, elementCount, intList, need, tensorValue } from './common.js';

export const Shape: Kernel = {
  op: 'Shape', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const rank = x.dims.length;
    let start = 0, end = rank;
    if (ctx.opset >= 15) {
      // start/end count from the back when negative and are clamped to [0, rank] (ONNX operator docs, Shape-15)
      const clamp = (v: number) => Math.min(Math.max(v < 0 ? v + rank : v, 0), rank);
      start = clamp(attrInt(ctx.node, 'start', 0));
      end = clamp(attrInt(ctx.node, 'end', rank));
    }
    const dims = x.dims.slice(start, Math.max(start, end));
    return [{ type: DataType.INT64, dims: [dims.length], data: Float64Array.from(dims) }];
  },
};

export const Size: Kernel = {
  op: 'Size', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    return [{ type: DataType.INT64, dims: [], data: Float64Array.of(elementCount(x.dims)) }];
  },
};

export const ConstantOfShape: Kernel = {
  op: 'ConstantOfShape', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const dims = intList(need(inputs, 0, ctx));
    if (dims.some((d) => d < 0)) throw badModel(ctx, `shape [${dims}] has a negative dimension`);
    const t = attrTensor(ctx.node, 'value');
    const fill = t ? tensorValue(t, ctx) : { type: DataType.FLOAT, data: Float64Array.of(0) };
    if (fill.data.length !== 1) throw badModel(ctx, 'value must hold exactly one element');
    const out = alloc(fill.type, elementCount(dims), ctx);
    out.fill(fill.data[0]!);
    return [{ type: fill.type, dims, data: out }];
  },
};

export const Range: Kernel = {
  op: 'Range', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const start = need(inputs, 0, ctx), limit = need(inputs, 1, ctx), delta = need(inputs, 2, ctx);
    const s = start.data[0]!, l = limit.data[0]!, d = delta.data[0]!;
    if (d === 0) throw badModel(ctx, 'delta is 0');
    const n = Math.max(Math.ceil((l - s) / d), 0);
    const out = alloc(start.type, n, ctx);
    for (let i = 0; i < n; i++) out[i] = s + i * d;
    return [{ type: start.type, dims: [n], data: out }];
  },
};
