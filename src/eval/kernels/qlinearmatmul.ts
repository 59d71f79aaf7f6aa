// QLinearMatMul (opsets 10, 21): y = saturate(round_half_even(MatMul(a - a_zp, b - b_zp) * a_scale * b_scale /
// y_scale) + y_zp). a's scale and zero point are scalars or one per row, b's one per column, y's one per row.
// The integer product is exact (float64 MatMul over centred integers); the requantization follows quant.ts.
import { centered, intRange, multipliers, requantize } from '../quant.js';
import type { Kernel } from '../value.js';
import { badModel } from '../attrs.js';
import { MatMul } from './matmul.js';
import { need } from './common.js';

export const QLinearMatMul: Kernel = {
  op: 'QLinearMatMul', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    const a = need(inputs, 0, ctx), as = need(inputs, 1, ctx), az = inputs[2];
    const b = need(inputs, 3, ctx), bs = need(inputs, 4, ctx), bz = inputs[5];
    const ys = need(inputs, 6, ctx), yz = inputs[7];
    const outType = yz?.type ?? a.type;
    if (!intRange(outType)) throw badModel(ctx, `output type ${outType} is not a quantized integer type`);
    const ac = centered(a, az, Math.max(0, a.dims.length - 2)), bc = centered(b, bz, b.dims.length - 1);
    const [y] = MatMul.run([ac, bc], { ...ctx, precision: 'float64', reusable: undefined });
    const acc = y!.data as Float64Array;
    const rank = y!.dims.length;
    const N = b.dims.length > 1 ? y!.dims[rank - 1]! : 1;
    const M = a.dims.length > 1 ? y!.dims[b.dims.length > 1 ? rank - 2 : rank - 1]! : 1;
    const row = (i: number) => Math.floor(i / N) % M, col = (i: number) => i % N;
    // one multiplier per output element position (row, column) when any scale is a vector
    const pick = (v: ArrayLike<number>, f: (i: number) => number, i: number) => Math.fround(v[v.length === 1 ? 0 : f(i)]!);
    const vector = as.data.length > 1 || bs.data.length > 1 || ys.data.length > 1 || (yz?.data.length ?? 1) > 1;
    if (!vector) {
      const m = multipliers(as.data, bs.data, ys.data);
      requantize(acc, m, yz?.data, () => 0, outType);
    } else {
      const m = new Float32Array(M * N);
      const z = new Float64Array(M * N);
      for (let i = 0; i < M * N; i++) {
        m[i] = Math.fround(Math.fround(pick(as.data, row, i) * pick(bs.data, col, i)) / pick(ys.data, row, i));
        z[i] = yz ? yz.data[yz.data.length === 1 ? 0 : row(i)]! : 0;
      }
      requantize(acc, m, z, (i) => i % (M * N), outType);
    }
    return [{ type: outType, dims: y!.dims, data: acc }];
  },
};
