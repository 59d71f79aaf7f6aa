// RNN (opsets 1-22), the ONNX operator documentation's equation (default f = Tanh):
//   Ht = f(Xt*(Wi^T) + Ht-1*(Ri^T) + Wbi + Rbi)
// Inputs X, W, R, B, sequence_lens, initial_h; outputs Y, Y_h. Directions, layout, sequence_lens, activations and
// clip come from recurrent.ts.
import type { Kernel, KernelContext, Value } from '../value.js';
import {
  clipped, gatePreActivations, initialState, outputs, recurrence, settle, startState, stateDims, stateOffset, steps,
  xOffset, yDims, yOffset,
} from './recurrent.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const r = recurrence(inputs, ctx, 1, ['Tanh']);
  const h0 = initialState(inputs, 5, r, ctx, 'initial_h');
  const { Y, S: [Yh] } = outputs(r, ctx, 1);
  const H = r.hidden;
  for (let d = 0; d < r.numDir; d++) {
    const [f] = r.acts[d]!;
    for (let b = 0; b < r.batch; b++) {
      let h = startState(h0, r, d, b);
      for (const t of steps(r.lens[b]!, r.reverse[d]!)) {
        const g = gatePreActivations(r, 1, d, xOffset(r, t, b), h, 1);
        for (let j = 0; j < H; j++) g[j] = f!(clipped(r, g[j]!));
        settle(g, ctx);
        h = g;
        Y.set(h, yOffset(r, t, d, b));
      }
      if (r.lens[b]! > 0) Yh!.set(h, stateOffset(r, d, b)); // zero-length: zeros (see recurrent.ts)
    }
  }
  return [{ type: r.X.type, dims: yDims(r), data: Y }, { type: r.X.type, dims: stateDims(r), data: Yh! }];
}

export const RNN: Kernel = { op: 'RNN', domain: '', sinceVersion: 1, run };
