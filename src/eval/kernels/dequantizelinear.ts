// DequantizeLinear (opsets 10, 13, 19, 21): y = (x - x_zero_point) * x_scale, per tensor, per axis (opset 13,
// `axis` default 1) or per block (opset 21, `block_size`). The output has the scale's element type (float32
// before opset 19); an int32 input has no zero point. The product is exact in float64 for 8- and 16-bit inputs.
import { DataType } from '../../graph/ir.js';
import { dataTypeName } from '../../graph/tensor.js';
import { intRange } from '../quant.js';
import type { Kernel } from '../value.js';
import { alloc, need, unsupported } from './common.js';
import { quantParams } from './quantizelinear.js';

export const DequantizeLinear: Kernel = {
  op: 'DequantizeLinear', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), scale = need(inputs, 1, ctx), zero = inputs[2];
    if (!intRange(x.type)) throw unsupported(ctx, `dequantizing ${dataTypeName(x.type)}`);
    const at = quantParams(x, scale, zero, ctx);
    const outType = ctx.opset >= 19 ? scale.type : DataType.FLOAT;
    const out = alloc(outType, x.data.length, ctx, false);
    const s = scale.data, z = zero?.data;
    for (let i = 0; i < out.length; i++) {
      const k = at(i);
      out[i] = (x.data[i]! - (z ? z[k]! : 0)) * s[k]!;
    }
    return [{ type: outType, dims: [...x.dims], data: out }];
  },
};
