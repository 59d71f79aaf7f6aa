// LSTM (opsets 1-22), the ONNX operator documentation's equations (default f = Sigmoid, g = Tanh, h = Tanh;
// gates stacked i, o, f, c in W, R and B; peepholes P stacked i, o, f):
//   it = f(Xt*(Wi^T) + Ht-1*(Ri^T) + Pi (.) Ct-1 + Wbi + Rbi)
//   ft = f(Xt*(Wf^T) + Ht-1*(Rf^T) + Pf (.) Ct-1 + Wbf + Rbf)
//   ct = g(Xt*(Wc^T) + Ht-1*(Rc^T) + Wbc + Rbc)
//   Ct = ft (.) Ct-1 + it (.) ct
//   ot = f(Xt*(Wo^T) + Ht-1*(Ro^T) + Po (.) Ct + Wbo + Rbo)
//   Ht = ot (.) h(Ct)
// input_forget = 1 couples the gates: ft = 1 - it (as onnxruntime computes it). Inputs X, W, R, B, sequence_lens,
// initial_h, initial_c, P; outputs Y, Y_h, Y_c.
import { attrInt } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import {
  clipped, initialState, inputProjection, outputs, recurrence, settle, startState, stateDims, stateOffset, steps,
  stepPreActivations, xRow, yDims, yOffset,
} from './recurrent.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const r = recurrence(inputs, ctx, 4, ['Sigmoid', 'Tanh', 'Tanh']);
  const h0 = initialState(inputs, 5, r, ctx, 'initial_h');
  const c0 = initialState(inputs, 6, r, ctx, 'initial_c');
  const P = inputs[7];
  const H = r.hidden;
  if (P && P.dims.join(',') !== `${r.numDir},${3 * H}`) throw badModel(ctx, `P has dims [${P.dims.join(',')}]; expected [${r.numDir},${3 * H}]`);
  const inputForget = attrInt(ctx.node, 'input_forget', 0) !== 0;
  const { Y, S: [Yh, Yc] } = outputs(r, ctx, 2);
  for (let d = 0; d < r.numDir; d++) {
    const [f, g, hf] = r.acts[d]!;
    const po = d * 3 * H;
    const peep = (k: number, j: number) => (P ? P.data[po + k * H + j]! : 0);
    const xw = inputProjection(r, 4, d, 4);
    const pre = new Float64Array(4 * H);
    for (let b = 0; b < r.batch; b++) {
      const h = startState(h0, r, d, b);
      const c = startState(c0, r, d, b);
      for (const t of steps(r.lens[b]!, r.reverse[d]!)) {
        stepPreActivations(r, 4, d, xw, xRow(r, t, b), h, 4, pre);
        for (let j = 0; j < H; j++) {
          const it = f!(clipped(r, pre[j]! + peep(0, j) * c[j]!));
          const ft = inputForget ? 1 - it : f!(clipped(r, pre[2 * H + j]! + peep(2, j) * c[j]!));
          const ct = g!(clipped(r, pre[3 * H + j]!));
          c[j] = ft * c[j]! + it * ct; // c[j] is read above before it is replaced
        }
        settle(c, ctx);
        for (let j = 0; j < H; j++) {
          const ot = f!(clipped(r, pre[H + j]! + peep(1, j) * c[j]!));
          h[j] = ot * hf!(c[j]!); // h is no longer needed: pre already holds h·R
        }
        settle(h, ctx);
        Y.set(h, yOffset(r, t, d, b));
      }
      if (r.lens[b]! > 0) { // zero-length: zeros (see recurrent.ts)
        Yh!.set(h, stateOffset(r, d, b));
        Yc!.set(c, stateOffset(r, d, b));
      }
    }
  }
  const type = r.X.type;
  return [{ type, dims: yDims(r), data: Y }, { type, dims: stateDims(r), data: Yh! }, { type, dims: stateDims(r), data: Yc! }];
}

export const LSTM: Kernel = { op: 'LSTM', domain: '', sinceVersion: 1, run };
