// QuantizeLinear (opsets 10, 13, 19, 21): y = saturate(round_half_even(x / y_scale) + y_zero_point), per tensor,
// per axis (opset 13, `axis` default 1) or per block along the axis (opset 21, `block_size`). The output type is
// the zero point's, else `output_dtype` (opset 21), else uint8. For a float32 input, x, the scale and the
// quotient are rounded to float32, the types the model declares, so a float64 run gives the integers the
// standard's float32 arithmetic gives (a float64 scale of 5/255 would turn -127.49999 into a tie at -127.5).
import { DataType, attrInt } from '../../graph/ir.js';
import { dataTypeName } from '../../graph/tensor.js';
import { intRange, roundHalfEven, saturate, scaleIndexer } from '../quant.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, badModel, need, normAxis, unsupported } from './common.js';

/** The scale/zero point index of each element of x, after checking the scale's shape against the opset's form. */
export function quantParams(x: Value, scale: Value, zero: Value | undefined, ctx: KernelContext): (i: number) => number {
  const rank = x.dims.length;
  const blockSize = ctx.opset >= 21 ? attrInt(ctx.node, 'block_size', 0) : 0;
  if (blockSize < 0) throw badModel(ctx, `block_size ${blockSize} is negative`);
  if (zero && zero.dims.join(',') !== scale.dims.join(',')) throw badModel(ctx, `zero point dims [${zero.dims}] differ from scale dims [${scale.dims}]`);
  const count = scale.data.length;
  if (blockSize === 0 && count === 1 && scale.dims.length <= 1) return () => 0;
  if (ctx.opset < 13) throw badModel(ctx, `scale has ${count} elements; before opset 13 it must be a scalar`);
  const axis = normAxis(attrInt(ctx.node, 'axis', 1), rank, ctx);
  if (blockSize === 0) {
    if (scale.dims.length !== 1 || count !== x.dims[axis]) throw badModel(ctx, `per-axis scale has dims [${scale.dims}], expected [${x.dims[axis]}] (axis ${axis})`);
  } else {
    const want = x.dims.map((d, k) => (k === axis ? Math.ceil(d / blockSize) : d));
    if (scale.dims.join(',') !== want.join(',')) throw badModel(ctx, `blocked scale has dims [${scale.dims}], expected [${want}] (axis ${axis}, block_size ${blockSize})`);
  }
  return scaleIndexer(x.dims, scale.dims, axis, blockSize);
}

export const QuantizeLinear: Kernel = {
  op: 'QuantizeLinear', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), scale = need(inputs, 1, ctx), zero = inputs[2];
    const outType = zero?.type ?? (ctx.opset >= 21 ? attrInt(ctx.node, 'output_dtype', 0) || DataType.UINT8 : DataType.UINT8);
    const range = intRange(outType);
    if (!range || outType === DataType.INT32) throw unsupported(ctx, `quantizing to ${dataTypeName(outType)}`);
    const [lo, hi] = range;
    const at = quantParams(x, scale, zero, ctx);
    const f32 = x.type !== DataType.INT32 && x.type !== DataType.DOUBLE;
    const out = alloc(outType, x.data.length, ctx, false);
    const s = scale.data, z = zero?.data;
    for (let i = 0; i < out.length; i++) {
      const k = at(i);
      const q = f32 ? Math.fround(Math.fround(x.data[i]!) / Math.fround(s[k]!)) : x.data[i]! / s[k]!;
      out[i] = saturate(roundHalfEven(q) + (z ? z[k]! : 0), lo, hi);
    }
    return [{ type: outType, dims: [...x.dims], data: out }];
  },
};
