// GRU (opsets 1-22), the ONNX operator documentation's equations (default f = Sigmoid, g = Tanh; gates stacked
// z, r, h in W, R and B):
//   zt = f(Xt*(Wz^T) + Ht-1*(Rz^T) + Wbz + Rbz)
//   rt = f(Xt*(Wr^T) + Ht-1*(Rr^T) + Wbr + Rbr)
//   ht = g(Xt*(Wh^T) + (rt (.) Ht-1)*(Rh^T) + Rbh + Wbh)        linear_before_reset = 0 (the default)
//   ht = g(Xt*(Wh^T) + (rt (.) (Ht-1*(Rh^T) + Rbh)) + Wbh)      linear_before_reset != 0 (opset 3 on)
//   Ht = (1 - zt) (.) ht + zt (.) Ht-1
// Inputs X, W, R, B, sequence_lens, initial_h; outputs Y, Y_h.
import type { Kernel, KernelContext, Value } from '../value.js';
import { attrInt } from '../../graph/ir.js';
import {
  clipped, dot, initialState, inputProjection, recurrentWeights, outputs, recurrence, settle, startState, stateDims, stateOffset, steps,
  stepPreActivations, xRow, yDims, yOffset,
} from './recurrent.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const r = recurrence(inputs, ctx, 3, ['Sigmoid', 'Tanh']);
  const h0 = initialState(inputs, 5, r, ctx, 'initial_h');
  const linearBeforeReset = ctx.opset >= 3 && attrInt(ctx.node, 'linear_before_reset', 0) !== 0;
  const { Y, S: [Yh] } = outputs(r, ctx, 1);
  const H = r.hidden, G = 3 * H, R = recurrentWeights(r), Bd = r.B?.data;
  for (let d = 0; d < r.numDir; d++) {
    const [f, g] = r.acts[d]!;
    const rhBlock = d * G * H + 2 * H * H; // Rh block of direction d
    const rbh = d * 2 * G + G + 2 * H; // Rbh
    const xw = inputProjection(r, 3, d, 2);
    const pre = new Float64Array(G), next = new Float64Array(H), z = new Float64Array(H), rg = new Float64Array(H);
    const resetH = new Float64Array(H); // rt (.) Ht-1
    for (let b = 0; b < r.batch; b++) {
      const h = startState(h0, r, d, b);
      for (const t of steps(r.lens[b]!, r.reverse[d]!)) {
        stepPreActivations(r, 3, d, xw, xRow(r, t, b), h, 2, pre);
        for (let j = 0; j < H; j++) { z[j] = f!(clipped(r, pre[j]!)); rg[j] = f!(clipped(r, pre[H + j]!)); }
        if (!linearBeforeReset) for (let k = 0; k < H; k++) resetH[k] = rg[k]! * h[k]!;
        for (let j = 0; j < H; j++) {
          const row = rhBlock + j * H;
          let acc: number;
          if (linearBeforeReset) acc = rg[j]! * (dot(h, R, row, H) + (Bd ? Bd[rbh + j]! : 0));
          else acc = dot(resetH, R, row, H) + (Bd ? Bd[rbh + j]! : 0);
          const hh = g!(clipped(r, pre[2 * H + j]! + acc));
          next[j] = (1 - z[j]!) * hh + z[j]! * h[j]!;
        }
        settle(next, ctx);
        h.set(next);
        Y.set(h, yOffset(r, t, d, b));
      }
      if (r.lens[b]! > 0) Yh!.set(h, stateOffset(r, d, b)); // zero-length: zeros (see recurrent.ts)
    }
  }
  return [{ type: r.X.type, dims: yDims(r), data: Y }, { type: r.X.type, dims: stateDims(r), data: Yh! }];
}

export const GRU: Kernel = { op: 'GRU', domain: '', sinceVersion: 1, run };
