// Sum, Max, Min, Mean over any number of inputs, with numpy-style broadcasting (opset >= 8; earlier opsets
// require equal shapes, which broadcasting also accepts).
import { broadcastBinary, broadcastShape, expandTo } from '../broadcast.js';
import type { Kernel, Value } from '../value.js';
import { alloc, badModel, elementCount, isIntegerType, wrapAll } from './common.js';

function variadic(op: string, fn: (a: number, b: number) => number, mean = false): Kernel {
  return {
    op, domain: '', sinceVersion: 1,
    run(inputs, ctx) {
      const parts = inputs.filter((v): v is Value => v !== undefined);
      if (parts.length === 0) throw badModel(ctx, 'no inputs');
      const type = parts[0]!.type;
      const dims = broadcastShape(parts.map((p) => p.dims), `node '${ctx.node.name}' (${op})`);
      const n = elementCount(dims);
      // accumulate in float64 and round once at the end, so float32 runs round like a single fused op
      let acc = new Float64Array(n);
      expandTo(parts[0]!.data, parts[0]!.dims, acc, dims);
      for (const p of parts.slice(1)) {
        const next = new Float64Array(n);
        broadcastBinary(acc, dims, p.data, p.dims, fn, next, dims);
        acc = next;
      }
      const out = alloc(type, n, ctx);
      const integer = isIntegerType(type);
      for (let i = 0; i < n; i++) out[i] = mean ? (integer ? Math.trunc(acc[i]! / parts.length) : acc[i]! / parts.length) : acc[i]!;
      if (integer) wrapAll(type, out);
      return [{ type, dims, data: out }];
    },
  };
}

export const Sum = variadic('Sum', (a, b) => a + b);
export const Mean = variadic('Mean', (a, b) => a + b, true);
// NaN propagates, as in the ONNX reference (numpy.maximum/minimum)
export const Max = variadic('Max', (a, b) => (a > b || Number.isNaN(a) ? a : b));
export const Min = variadic('Min', (a, b) => (a < b || Number.isNaN(a) ? a : b));
