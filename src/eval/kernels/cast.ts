// Cast and CastLike. Float to integer truncates toward zero and wraps to the target type; anything to BOOL is
// "non-zero"; to FLOAT16/BFLOAT16 rounds to nearest even in that format, since the narrow format is the point
// of such a cast. Casts to FLOAT/DOUBLE keep the evaluator's working precision (a float64 run stays exact).
import { attr } from '../../graph/ir.js';
import { bfloatBitsToNumber, dataTypeName, halfBitsToNumber, numberToBfloatBits, numberToHalfBits } from '../../graph/tensor.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { DataType, alloc, isFloatType, isIntegerType, need, unsupported, wrapInt } from './common.js';

const BY_NAME: Record<string, number> = {
  FLOAT: 1, UINT8: 2, INT8: 3, UINT16: 4, INT16: 5, INT32: 6, INT64: 7, STRING: 8, BOOL: 9, FLOAT16: 10,
  DOUBLE: 11, UINT32: 12, UINT64: 13, BFLOAT16: 16,
};

/** Convert x's elements to element type `to`. */
export function castValue(x: Value, to: number, ctx: KernelContext): Value {
  if (x.type === DataType.STRING || to === DataType.STRING || !(to >= 1 && to <= 16) || to === 14 || to === 15) {
    throw unsupported(ctx, `a cast from ${dataTypeName(x.type)} to ${dataTypeName(to)}`);
  }
  const src = x.data;
  const out = alloc(to, src.length, ctx);
  if (to === DataType.BOOL) for (let i = 0; i < src.length; i++) out[i] = src[i] !== 0 ? 1 : 0;
  else if (to === DataType.FLOAT16) for (let i = 0; i < src.length; i++) out[i] = halfBitsToNumber(numberToHalfBits(src[i]!));
  else if (to === DataType.BFLOAT16) for (let i = 0; i < src.length; i++) out[i] = bfloatBitsToNumber(numberToBfloatBits(src[i]!));
  else if (isFloatType(to)) out.set(src);
  else if (isIntegerType(to)) {
    const fromFloat = isFloatType(x.type);
    for (let i = 0; i < src.length; i++) {
      const v = fromFloat ? Math.trunc(src[i]!) : src[i]!;
      out[i] = Number.isFinite(v) ? wrapInt(to, v) : 0; // NaN/inf to integer is undefined in ONNX; pleat yields 0
    }
  }
  return { type: to, dims: [...x.dims], data: out };
}

export const Cast: Kernel = {
  op: 'Cast', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const a = attr(ctx.node, 'to');
    // opset 1-5 spells the target as a string ("FLOAT"); later opsets use the DataType code
    const to = a?.type === 'INT' ? a.i : a?.type === 'STRING' ? BY_NAME[new TextDecoder().decode(a.s).toUpperCase()] : undefined;
    if (to === undefined) throw unsupported(ctx, 'a Cast without a valid to attribute');
    return [castValue(x, to, ctx)];
  },
};

export const CastLike: Kernel = {
  op: 'CastLike', domain: '', sinceVersion: 15,
  run: (inputs, ctx) => [castValue(need(inputs, 0, ctx), need(inputs, 1, ctx).type, ctx)],
};
