// MaxUnpool (opsets 9, 11): scatters X into a zero tensor at the flat positions in I (the Indices output of
// MaxPool, flat over the whole tensor of the default output dims N x C x ((in - 1) * stride + kernel -
// pad_begin - pad_end) per spatial axis, ONNX MaxUnpool docs). With the output_shape input the output takes
// those dims and each value keeps its coordinates, the extra rows and columns staying zero, as the ONNX
// backend case test_maxunpool_export_with_output_shape expects (onnxruntime 1.30 instead writes at the same
// flat position of the larger tensor, which moves the values).
import { attrInts } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, intList, need, stridesOf } from './common.js';

export const MaxUnpool: Kernel = {
  op: 'MaxUnpool', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), idx = need(inputs, 1, ctx), shape = inputs[2];
    const sp = x.dims.length - 2;
    const kernel = attrInts(ctx.node, 'kernel_shape');
    if (!kernel || kernel.length !== sp) throw badModel(ctx, 'attribute kernel_shape is missing or of the wrong length');
    const strides = attrInts(ctx.node, 'strides') ?? new Array(sp).fill(1);
    const pads = attrInts(ctx.node, 'pads') ?? new Array(2 * sp).fill(0);
    const inferred = [x.dims[0]!, x.dims[1]!, ...kernel.map((k, i) => (x.dims[2 + i]! - 1) * strides[i]! + k - pads[i]! - pads[sp + i]!)];
    const dims = shape ? intList(shape) : inferred;
    if (dims.length !== inferred.length || dims.some((d, i) => d < inferred[i]!)) throw badModel(ctx, `output_shape [${dims}] is smaller than the unpooled shape [${inferred}]`);
    if (idx.dims.join(',') !== x.dims.join(',')) throw badModel(ctx, `indices [${idx.dims}] differ from X [${x.dims}]`);
    const n = elementCount(inferred);
    const from = stridesOf(inferred), to = stridesOf(dims);
    const out = alloc(x.type, elementCount(dims), ctx);
    for (let i = 0; i < x.data.length; i++) {
      const at = idx.data[i]!;
      if (!(at >= 0 && at < n)) throw badModel(ctx, `index ${at} is outside the unpooled tensor of ${n} elements`);
      let rem = at, pos = 0;
      for (let d = 0; d < dims.length; d++) { const c = Math.floor(rem / from[d]!); rem -= c * from[d]!; pos += c * to[d]!; }
      out[pos] = x.data[i]!;
    }
    return [{ type: x.type, dims, data: out }];
  },
};
