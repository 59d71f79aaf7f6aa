// LRN (opsets 1, 13), local response normalization across channels (ONNX LRN docs): with s = sum of x^2 over
// channels [c - floor((size-1)/2), c + ceil((size-1)/2)] clipped to the tensor, y = x / (bias + alpha/size *
// s)^beta. Defaults: alpha 1e-4, beta 0.75, bias 1; size is required.
import { attrFloat, attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, need } from './common.js';

export const LRN: Kernel = {
  op: 'LRN', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const size = attrInt(ctx.node, 'size');
    if (!size || size < 1) throw badModel(ctx, 'attribute size is missing or not positive');
    const alpha = attrFloat(ctx.node, 'alpha', 1e-4), beta = attrFloat(ctx.node, 'beta', 0.75), bias = attrFloat(ctx.node, 'bias', 1);
    if (x.dims.length < 2) throw badModel(ctx, `input has rank ${x.dims.length}; LRN needs N x C x ...`);
    const [N, C] = x.dims as [number, number];
    const inner = elementCount(x.dims.slice(2));
    const lo = Math.floor((size - 1) / 2), hi = Math.ceil((size - 1) / 2);
    const out = alloc(x.type, x.data.length, ctx, false);
    for (let n = 0; n < N; n++) {
      for (let c = 0; c < C; c++) {
        const c0 = Math.max(0, c - lo), c1 = Math.min(C - 1, c + hi);
        for (let i = 0; i < inner; i++) {
          let s = 0;
          for (let k = c0; k <= c1; k++) { const v = x.data[(n * C + k) * inner + i]!; s += v * v; }
          const at = (n * C + c) * inner + i;
          out[at] = x.data[at]! / Math.pow(bias + (alpha / size) * s, beta);
        }
      }
    }
    return [{ type: x.type, dims: [...x.dims], data: out }];
  },
};
