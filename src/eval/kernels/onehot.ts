// OneHot (opsets 9, 11): output[..., j, ...] = on_value where j == indices[...] along the new axis `axis`
// (default -1, in [-r-1, r]), off_value elsewhere; `values` is [off, on] and gives the output type. Indices
// outside [-depth, depth) give an all-off row; negative ones count from the end (opset 11; onnxruntime also
// does so at opset 9). Non-integer indices and depth are truncated.
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need } from './common.js';

export const OneHot: Kernel = {
  op: 'OneHot', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const indices = need(inputs, 0, ctx), depthV = need(inputs, 1, ctx), values = need(inputs, 2, ctx);
    if (depthV.data.length !== 1) throw badModel(ctx, `depth has ${depthV.data.length} elements, expected 1`);
    if (values.data.length !== 2) throw badModel(ctx, `values has ${values.data.length} elements, expected 2 (off, on)`);
    const depth = Math.trunc(depthV.data[0]!);
    if (depth < 1) throw badModel(ctx, `depth ${depth} must be positive`);
    const r = indices.dims.length;
    let axis = attrInt(ctx.node, 'axis', -1);
    if (axis < 0) axis += r + 1;
    if (axis < 0 || axis > r) throw badModel(ctx, `axis ${attrInt(ctx.node, 'axis', -1)} is out of range for output rank ${r + 1}`);
    const dims = [...indices.dims.slice(0, axis), depth, ...indices.dims.slice(axis)];
    const outer = elementCount(indices.dims.slice(0, axis)), inner = elementCount(indices.dims.slice(axis));
    const off = values.data[0]!, on = values.data[1]!;
    const out = alloc(values.type, outer * depth * inner, ctx, false);
    out.fill(off);
    for (let o = 0; o < outer; o++) {
      for (let i = 0; i < inner; i++) {
        let idx = Math.trunc(indices.data[o * inner + i]!);
        if (idx < 0) idx += depth;
        if (idx >= 0 && idx < depth) out[(o * depth + idx) * inner + i] = on;
      }
    }
    return [{ type: values.type, dims, data: out }];
  },
};
