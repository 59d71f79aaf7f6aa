// Det (opsets 11, 22): determinant of each square matrix in the last two axes, by LU decomposition with partial
// pivoting in float64.
import type { Kernel } from '../value.js';
import { alloc, badModel, need } from './common.js';

export const Det: Kernel = {
  op: 'Det', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const r = x.dims.length;
    const n = x.dims[r - 1]!;
    if (r < 2 || x.dims[r - 2] !== n) throw badModel(ctx, `input [${x.dims}] is not a batch of square matrices`);
    const count = n === 0 ? 0 : x.data.length / (n * n);
    const out = alloc(x.type, count, ctx, false);
    const a = new Float64Array(n * n);
    for (let m = 0; m < count; m++) {
      for (let i = 0; i < n * n; i++) a[i] = x.data[m * n * n + i]!;
      let det = 1;
      for (let c = 0; c < n && det !== 0; c++) {
        let p = c;
        for (let i = c + 1; i < n; i++) if (Math.abs(a[i * n + c]!) > Math.abs(a[p * n + c]!)) p = i;
        if (a[p * n + c] === 0) { det = 0; break; }
        if (p !== c) {
          for (let j = 0; j < n; j++) { const t = a[c * n + j]!; a[c * n + j] = a[p * n + j]!; a[p * n + j] = t; }
          det = -det;
        }
        const piv = a[c * n + c]!;
        det *= piv;
        for (let i = c + 1; i < n; i++) {
          const f = a[i * n + c]! / piv;
          if (f !== 0) for (let j = c + 1; j < n; j++) a[i * n + j] -= f * a[c * n + j]!;
        }
      }
      out[m] = det;
    }
    return [{ type: x.type, dims: x.dims.slice(0, r - 2), data: out }];
  },
};
