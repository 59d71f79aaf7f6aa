// Constant: the value attribute in any of its forms (value, value_float(s), value_int(s)). String and sparse
// constants are not numeric tensors pleat evaluates, so they stop with a one-line error.
import type { Kernel, Value } from '../value.js';
import { DataType, alloc, tensorValue, unsupported } from './common.js';

export const Constant: Kernel = {
  op: 'Constant', domain: '', sinceVersion: 1,
  run(_inputs, ctx): Value[] {
    const a = ctx.node.attributes[0];
    if (!a || ctx.node.attributes.length !== 1) throw unsupported(ctx, 'a Constant without exactly one value attribute');
    const v = a.value;
    const floats = (xs: number[], dims: number[]): Value => {
      const data = alloc(DataType.FLOAT, xs.length, ctx);
      data.set(xs);
      return { type: DataType.FLOAT, dims, data };
    };
    switch (a.name) {
      case 'value':
        if (v.type === 'TENSOR') return [tensorValue(v.t, ctx)];
        break;
      case 'value_float':
        if (v.type === 'FLOAT') return [floats([v.f], [])];
        break;
      case 'value_floats':
        if (v.type === 'FLOATS') return [floats(v.floats, [v.floats.length])];
        break;
      case 'value_int':
        if (v.type === 'INT') return [{ type: DataType.INT64, dims: [], data: Float64Array.of(v.i) }];
        break;
      case 'value_ints':
        if (v.type === 'INTS') return [{ type: DataType.INT64, dims: [v.ints.length], data: Float64Array.from(v.ints) }];
        break;
    }
    throw unsupported(ctx, `the ${a.name} attribute`);
  },
};
