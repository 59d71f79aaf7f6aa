// Trilu (opset 14): keeps the upper (upper=1, the default: column - row >= k) or lower (column - row <= k)
// triangle of each matrix in the last two axes and zeroes the rest; k is an optional int64 scalar input.
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need } from './common.js';

export const Trilu: Kernel = {
  op: 'Trilu', domain: '', sinceVersion: 14,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const k = inputs[1] ? inputs[1].data[0]! : 0;
    const upper = attrInt(ctx.node, 'upper', 1) !== 0;
    const r = x.dims.length;
    if (r < 2) throw badModel(ctx, `input has rank ${r}; Trilu needs rank >= 2`);
    const rows = x.dims[r - 2]!, cols = x.dims[r - 1]!;
    const out = alloc(x.type, x.data.length, ctx, false);
    const plane = rows * cols;
    for (let p = 0; p < x.data.length; p += plane) {
      for (let i = 0; i < rows; i++) {
        for (let j = 0; j < cols; j++) {
          const keep = upper ? j - i >= k : j - i <= k;
          out[p + i * cols + j] = keep ? x.data[p + i * cols + j]! : 0;
        }
      }
    }
    return [{ type: x.type, dims: [...x.dims], data: out }];
  },
};
