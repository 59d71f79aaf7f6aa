// CumSum (opsets 11 and 14), ONNX operator docs: running sums along `axis` (a scalar input); exclusive = 1
// leaves the current element out (the first sum is 0), reverse = 1 sums from the end of the axis.
import { attrInt } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, elementCount, need, normAxis, wrapAll } from './common.js';
import { badModel } from '../attrs.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const x = need(inputs, 0, ctx), a = need(inputs, 1, ctx);
  if (a.data.length !== 1) throw badModel(ctx, `axis holds ${a.data.length} values; it must hold one`);
  const axis = normAxis(Math.trunc(a.data[0]!), x.dims.length, ctx);
  const exclusive = attrInt(ctx.node, 'exclusive', 0) !== 0, reverse = attrInt(ctx.node, 'reverse', 0) !== 0;
  const len = x.dims[axis]!;
  const outer = elementCount(x.dims.slice(0, axis)), inner = elementCount(x.dims.slice(axis + 1));
  const y = alloc(x.type, x.data.length, ctx, false);
  const src = x.data;
  for (let o = 0; o < outer; o++) {
    for (let i = 0; i < inner; i++) {
      let acc = 0;
      for (let s = 0; s < len; s++) {
        const t = reverse ? len - 1 - s : s;
        const at = (o * len + t) * inner + i;
        if (exclusive) { y[at] = acc; acc += src[at]!; } else { acc += src[at]!; y[at] = acc; }
      }
    }
  }
  wrapAll(x.type, y);
  return [{ type: x.type, dims: [...x.dims], data: y }];
}

export const CumSum: Kernel = { op: 'CumSum', domain: '', sinceVersion: 11, run };
