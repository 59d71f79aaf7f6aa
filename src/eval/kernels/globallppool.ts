// GlobalLpPool (GlobalLpPool-1, -2 operator docs): Y[n, c] = (sum over every spatial position of |x|^p)^(1/p),
// with the spatial axes kept as size 1. p is a float attribute at opset 1 and an int from opset 2, default 2.
import { elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, need } from '../attrs.js';
import type { Kernel } from '../value.js';
import { absPow, normOrder, root } from './lppool.js';

export const GlobalLpPool: Kernel = {
  op: 'GlobalLpPool', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const X = need(inputs, 0, ctx, 'X');
    if (X.dims.length < 2) throw badModel(ctx, `input has rank ${X.dims.length}; global pooling needs N x C x ...`);
    const p = normOrder(ctx);
    const NC = X.dims[0]! * X.dims[1]!, inner = elementCount(X.dims.slice(2));
    const Y = allocFloat(NC, ctx.precision, false), x = X.data;
    for (let i = 0; i < NC; i++) {
      let sum = 0;
      for (let j = i * inner; j < (i + 1) * inner; j++) sum += absPow(x[j]!, p);
      Y[i] = root(sum, p);
    }
    return [{ type: X.type, dims: [X.dims[0]!, X.dims[1]!, ...X.dims.slice(2).map(() => 1)], data: Y }];
  },
};
