// EyeLike (opsets 9, 22): a 2-D tensor shaped like the input with ones on the k-th diagonal (k default 0,
// positive above the main one) and zeros elsewhere, of element type `dtype` (default: the input's).
import { attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need } from './common.js';

export const EyeLike: Kernel = {
  op: 'EyeLike', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    if (x.dims.length !== 2) throw badModel(ctx, `input has rank ${x.dims.length}; EyeLike needs a 2-D input`);
    const type = attrInt(ctx.node, 'dtype', x.type);
    const k = attrInt(ctx.node, 'k', 0);
    const [rows, cols] = x.dims as [number, number];
    const out = alloc(type, rows * cols, ctx);
    for (let i = 0; i < rows; i++) {
      const j = i + k;
      if (j >= 0 && j < cols) out[i * cols + j] = 1;
    }
    return [{ type, dims: [rows, cols], data: out }];
  },
};
