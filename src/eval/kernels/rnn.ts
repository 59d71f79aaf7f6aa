// RNN (opsets 1-22), the ONNX operator documentation's equation (default f = Tanh):
//   Ht = f(Xt*(Wi^T) + Ht-1*(Ri^T) + Wbi + Rbi)
// Inputs X, W, R, B, sequence_lens, initial_h; outputs Y, Y_h. Directions, layout, sequence_lens, activations and
// clip come from recurrent.ts.
import type { Kernel, KernelContext, Value } from '../value.js';
import {
  clipped, initialState, inputProjection, outputs, recurrence, settle, startState, stateDims, stateOffset, steps,
  stepPreActivations, xRow, yDims, yOffset,
} from './recurrent.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const r = recurrence(inputs, ctx, 1, ['Tanh']);
  const h0 = initialState(inputs, 5, r, ctx, 'initial_h');
  const { Y, S: [Yh] } = outputs(r, ctx, 1);
  const H = r.hidden;
  for (let d = 0; d < r.numDir; d++) {
    const [f] = r.acts[d]!;
    const xw = inputProjection(r, 1, d, 1);
    const g = new Float64Array(H);
    for (let b = 0; b < r.batch; b++) {
      const h = startState(h0, r, d, b);
      for (const t of steps(r.lens[b]!, r.reverse[d]!)) {
        stepPreActivations(r, 1, d, xw, xRow(r, t, b), h, 1, g);
        for (let j = 0; j < H; j++) h[j] = f!(clipped(r, g[j]!));
        settle(h, ctx);
        Y.set(h, yOffset(r, t, d, b));
      }
      if (r.lens[b]! > 0) Yh!.set(h, stateOffset(r, d, b)); // zero-length: zeros (see recurrent.ts)
    }
  }
  return [{ type: r.X.type, dims: yDims(r), data: Y }, { type: r.X.type, dims: stateDims(r), data: Yh! }];
}

export const RNN: Kernel = { op: 'RNN', domain: '', sinceVersion: 1, run };
