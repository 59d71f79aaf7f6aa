// Identity, and Dropout in inference mode: the output is the input; Dropout's optional mask is all true.
import type { Kernel, Value } from '../value.js';
import { DataType, alloc, need, unsupported } from './common.js';

export const Identity: Kernel = {
  op: 'Identity', domain: '', sinceVersion: 1,
  run: (inputs, ctx) => [need(inputs, 0, ctx)],
};

export const Dropout: Kernel = {
  op: 'Dropout', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    // training_mode (input 2, opset >= 12) asks for random masking, which a deterministic evaluator cannot do
    if (ctx.opset >= 12 && inputs[2] && inputs[2].data[0] !== 0) throw unsupported(ctx, 'training_mode=true');
    const outs: Value[] = [x];
    if (ctx.node.outputs.length > 1 && ctx.node.outputs[1] !== '') {
      // the mask is BOOL from opset 10 on; before that it had the input's type
      const type = ctx.opset >= 10 ? DataType.BOOL : x.type;
      outs.push({ type, dims: [...x.dims], data: alloc(type, x.data.length, ctx).fill(1) });
    }
    return outs;
  },
};
