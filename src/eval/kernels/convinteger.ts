// ConvInteger (opset 10): Conv over (x - x_zero_point) and (w - w_zero_point) with an int32 result. The zero
// point of w is a scalar or one per output channel. The centred integers run through the Conv kernel in float64,
// where every product and sum is exact.
import { DataType } from '../../graph/ir.js';
import { centered } from '../quant.js';
import type { Kernel } from '../value.js';
import { Conv } from './conv.js';
import { need } from './common.js';

export const ConvInteger: Kernel = {
  op: 'ConvInteger', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), w = need(inputs, 1, ctx);
    const xc = centered(x, inputs[2]), wc = centered(w, inputs[3], 0);
    const [y] = Conv.run([xc, wc], { ...ctx, precision: 'float64', reusable: undefined });
    return [{ type: DataType.INT32, dims: y!.dims, data: y!.data }];
  },
};
