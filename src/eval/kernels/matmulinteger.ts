// MatMulInteger (opset 10): MatMul over (A - a_zero_point) and (B - b_zero_point) with an int32 result. A's zero
// point is a scalar or one per row (its second-last axis), B's a scalar or one per column (its last axis). The
// centred integers run through the MatMul kernel in float64, where every product and sum is exact.
import { DataType } from '../../graph/ir.js';
import { centered } from '../quant.js';
import type { Kernel } from '../value.js';
import { MatMul } from './matmul.js';
import { need } from './common.js';

export const MatMulInteger: Kernel = {
  op: 'MatMulInteger', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const a = need(inputs, 0, ctx), b = need(inputs, 1, ctx);
    const ac = centered(a, inputs[2], Math.max(0, a.dims.length - 2)), bc = centered(b, inputs[3], b.dims.length - 1);
    const [y] = MatMul.run([ac, bc], { ...ctx, precision: 'float64', reusable: undefined });
    return [{ type: DataType.INT32, dims: y!.dims, data: y!.data as Float64Array }];
  },
};
