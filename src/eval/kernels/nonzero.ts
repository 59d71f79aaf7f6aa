// NonZero (opsets 9, 13): the coordinates of the non-zero elements in row-major order, as an int64 tensor
// [rank, count] (numpy nonzero; a scalar counts as rank 1, as numpy treats it).
import { DataType } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, need, stridesOf } from './common.js';

export const NonZero: Kernel = {
  op: 'NonZero', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const dims = x.dims.length === 0 ? [1] : x.dims;
    const rank = dims.length, st = stridesOf(dims);
    const hits: number[] = [];
    for (let i = 0; i < x.data.length; i++) if (x.data[i] !== 0) hits.push(i);
    const n = hits.length;
    const out = alloc(DataType.INT64, rank * n, ctx, false);
    hits.forEach((flat, t) => {
      let rem = flat;
      for (let d = 0; d < rank; d++) {
        const c = Math.floor(rem / st[d]!);
        rem -= c * st[d]!;
        out[d * n + t] = c;
      }
    });
    return [{ type: DataType.INT64, dims: [rank, n], data: out }];
  },
};
