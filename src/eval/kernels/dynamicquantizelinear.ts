// DynamicQuantizeLinear (opset 11): uint8 quantization with a scale and zero point computed from the data
// (ONNX docs): the range is widened to include 0, y_scale = (max - min) / 255, y_zero_point =
// saturate(round_half_even(0 - min / y_scale)), y = saturate(round_half_even(x / y_scale) + y_zero_point).
// Arithmetic is in float32, the input's type, so both precision modes give the same integers.
import { DataType } from '../../graph/ir.js';
import { roundHalfEven, saturate } from '../quant.js';
import type { Kernel } from '../value.js';
import { alloc, need } from './common.js';

const f = Math.fround;

export const DynamicQuantizeLinear: Kernel = {
  op: 'DynamicQuantizeLinear', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    let min = 0, max = 0;
    for (let i = 0; i < x.data.length; i++) {
      const v = f(x.data[i]!);
      if (v < min) min = v;
      if (v > max) max = v;
    }
    const scale = f(f(max - min) / 255);
    const zp = scale === 0 ? 0 : saturate(roundHalfEven(f(0 - f(min / scale))), 0, 255);
    const y = alloc(DataType.UINT8, x.data.length, ctx, false);
    for (let i = 0; i < y.length; i++) y[i] = scale === 0 ? zp : saturate(roundHalfEven(f(f(x.data[i]!) / scale)) + zp, 0, 255);
    const s = alloc(DataType.FLOAT, 1, ctx);
    s[0] = scale;
    const z = alloc(DataType.UINT8, 1, ctx);
    z[0] = zp;
    return [
      { type: DataType.UINT8, dims: [...x.dims], data: y },
      { type: DataType.FLOAT, dims: [], data: s },
      { type: DataType.UINT8, dims: [], data: z },
    ];
  },
};
