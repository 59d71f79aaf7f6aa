// QLinearConv (opset 10): y = saturate(round_half_even((Conv(x - x_zp, w - w_zp) + B) * x_scale * w_scale /
// y_scale) + y_zp). w_scale and w_zero_point are scalars or one per output channel; B is int32. The integer
// convolution is exact (float64 Conv over centred integers); the requantization follows quant.ts.
import { badModel } from '../attrs.js';
import { centered, intRange, multipliers, requantize } from '../quant.js';
import type { Kernel } from '../value.js';
import { Conv } from './conv.js';
import { need } from './common.js';

export const QLinearConv: Kernel = {
  op: 'QLinearConv', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), xs = need(inputs, 1, ctx), xz = inputs[2];
    const w = need(inputs, 3, ctx), ws = need(inputs, 4, ctx), wz = inputs[5];
    const ys = need(inputs, 6, ctx), yz = inputs[7], bias = inputs[8];
    const M = w.dims[0]!;
    if (ws.data.length !== 1 && ws.data.length !== M) throw badModel(ctx, `w_scale has ${ws.data.length} values for ${M} output channels`);
    const outType = yz?.type ?? x.type;
    if (!intRange(outType)) throw badModel(ctx, `output type ${outType} is not a quantized integer type`);
    const xc = centered(x, xz), wc = centered(w, wz, 0);
    const b = bias ? { type: xc.type, dims: [...bias.dims], data: Float64Array.from(bias.data) } : undefined;
    const [y] = Conv.run([xc, wc, b], { ...ctx, precision: 'float64', reusable: undefined });
    const acc = y!.data as Float64Array;
    const plane = acc.length / (y!.dims[0]! * M);
    const mult = multipliers(xs.data, ws.data, ys.data);
    requantize(acc, mult, yz?.data, mult.length === 1 ? () => 0 : (i) => Math.floor(i / plane) % M, outType);
    return [{ type: outType, dims: y!.dims, data: acc }];
  },
};
