// Softmax, LogSoftmax and Hardmax. Before opset 13 the input is coerced to 2-D at `axis` (default 1) and each
// row is normalised; from opset 13 the normalisation runs along the single axis `axis` (default -1). Softmax
// and LogSoftmax subtract the running maximum first, so large logits do not overflow.
import { attrInt } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, elementCount, need, normAxis } from './common.js';

type Mode = 'softmax' | 'log' | 'hard';

function softmaxLike(x: Value, ctx: KernelContext, mode: Mode): Value {
  const rank = x.dims.length;
  const legacy = ctx.opset < 13;
  const axis = rank === 0 ? 0 : normAxis(attrInt(ctx.node, 'axis', legacy ? 1 : -1), rank, ctx);
  const outer = elementCount(x.dims.slice(0, axis));
  const len = legacy ? elementCount(x.dims.slice(axis)) : x.dims[axis] ?? 1;
  const inner = legacy ? 1 : elementCount(x.dims.slice(axis + 1));
  const src = x.data;
  const out = alloc(x.type, src.length, ctx);
  for (let o = 0; o < outer; o++) {
    for (let i = 0; i < inner; i++) {
      const base = o * len * inner + i;
      let max = -Infinity, argmax = 0;
      for (let k = 0; k < len; k++) {
        const v = src[base + k * inner]!;
        if (v > max) { max = v; argmax = k; }
      }
      if (mode === 'hard') {
        // 1 at the first maximum, 0 elsewhere (ONNX Hardmax docs)
        for (let k = 0; k < len; k++) out[base + k * inner] = k === argmax ? 1 : 0;
        continue;
      }
      let sum = 0;
      for (let k = 0; k < len; k++) sum += Math.exp(src[base + k * inner]! - max);
      if (mode === 'log') {
        const lse = Math.log(sum);
        for (let k = 0; k < len; k++) out[base + k * inner] = src[base + k * inner]! - max - lse;
      } else {
        for (let k = 0; k < len; k++) out[base + k * inner] = Math.exp(src[base + k * inner]! - max) / sum;
      }
    }
  }
  return { type: x.type, dims: [...x.dims], data: out };
}

export const Softmax: Kernel = {
  op: 'Softmax', domain: '', sinceVersion: 1,
  run: (inputs, ctx) => [softmaxLike(need(inputs, 0, ctx), ctx, 'softmax')],
};

export const LogSoftmax: Kernel = {
  op: 'LogSoftmax', domain: '', sinceVersion: 1,
  run: (inputs, ctx) => [softmaxLike(need(inputs, 0, ctx), ctx, 'log')],
};

export const Hardmax: Kernel = {
  op: 'Hardmax', domain: '', sinceVersion: 1,
  run: (inputs, ctx) => [softmaxLike(need(inputs, 0, ctx), ctx, 'hard')],
};
