// Seeded random RNN/GRU/LSTM nodes for the differential tests in lstm.test.ts, gru.test.ts and rnn.test.ts:
// random sizes, direction, layout (opset 14), bias, sequence_lens, initial states, peepholes, clip and
// activation lists, each compared with onnxruntime-node (graph optimizations off) through vsOrt.
import { expect } from 'vitest';
import { randn, rng, T, vsOrt, type In } from './ort-compare.js';
import { runBoth } from './harness.js';
import { GraphBuilder } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { modelBytes } from '../helpers/build.js';
import { runModel } from '../../src/eval/run.js';
import type { Value } from '../../src/eval/value.js';
import { fs, type AttrIn } from '../helpers/build.js';

export type Cell = 'RNN' | 'GRU' | 'LSTM';

const GATES: Record<Cell, number> = { RNN: 1, GRU: 3, LSTM: 4 };
const FUNCS: Record<Cell, number> = { RNN: 1, GRU: 2, LSTM: 3 };
// functions onnxruntime's CPU recurrent kernels accept, with alpha/beta where they take them
const POOL = ['Sigmoid', 'Tanh', 'Relu', 'HardSigmoid', 'LeakyRelu', 'Softsign', 'Softplus', 'ScaledTanh', 'Affine', 'Elu', 'ThresholdedRelu'];

export interface Case { ins: In[]; attrs: Record<string, AttrIn>; outs: string[]; label: string }

export interface CaseOptions {
  direction?: 'forward' | 'reverse' | 'bidirectional';
  seqLens?: boolean;
  layout?: number;
  linearBeforeReset?: boolean;
  peepholes?: boolean;
  activations?: boolean;
  clip?: boolean;
  inputForget?: boolean;
  /** Force batch entry 0 to an empty sequence (sequence_lens[0] = 0). */
  zeroLength?: boolean;
}

/** One random node of `cell`; options force features, the seed picks the rest. */
export function randomCase(cell: Cell, seed: number, o: CaseOptions = {}): Case {
  const r = rng(seed);
  const pick = <V>(xs: V[]): V => xs[Math.floor(r() * xs.length)]!;
  const seq = 1 + Math.floor(r() * 5), batch = 1 + Math.floor(r() * 3);
  const inSize = 1 + Math.floor(r() * 4), H = 1 + Math.floor(r() * 4);
  const direction = o.direction ?? pick(['forward', 'reverse', 'bidirectional'] as const);
  const nd = direction === 'bidirectional' ? 2 : 1;
  const layout = o.layout ?? 0;
  const G = GATES[cell];
  const xDims = layout === 0 ? [seq, batch, inSize] : [batch, seq, inSize];
  const sDims = layout === 0 ? [nd, batch, H] : [batch, nd, H];
  const count = (d: number[]) => d.reduce((a, b) => a * b, 1);
  const ins: In[] = [
    { name: 'X', dims: xDims, data: randn(r, count(xDims)) },
    { name: 'W', dims: [nd, G * H, inSize], data: randn(r, nd * G * H * inSize, 0.6) },
    { name: 'R', dims: [nd, G * H, H], data: randn(r, nd * G * H * H, 0.6) },
  ];
  const useB = r() < 0.7;
  ins.push(useB ? { name: 'B', dims: [nd, 2 * G * H], data: randn(r, nd * 2 * G * H, 0.5) } : { name: '', dims: [], data: [] });
  const seqLens = o.seqLens ?? r() < 0.5;
  ins.push(seqLens
    ? { name: 'sequence_lens', dims: [batch], data: Array.from({ length: batch }, (_, b) => (b === 0 && o.zeroLength ? 0 : Math.floor(r() * (seq + 1)))), type: T.INT32 }
    : { name: '', dims: [], data: [] });
  ins.push(r() < 0.6 ? { name: 'initial_h', dims: sDims, data: randn(r, count(sDims), 0.5) } : { name: '', dims: [], data: [] });
  if (cell === 'LSTM') {
    ins.push(r() < 0.6 ? { name: 'initial_c', dims: sDims, data: randn(r, count(sDims), 0.5) } : { name: '', dims: [], data: [] });
    const peep = o.peepholes ?? r() < 0.5;
    ins.push(peep ? { name: 'P', dims: [nd, 3 * H], data: randn(r, nd * 3 * H, 0.5) } : { name: '', dims: [], data: [] });
  }
  while (ins.length > 0 && ins[ins.length - 1]!.name === '') ins.pop();
  const attrs: Record<string, AttrIn> = { hidden_size: H, direction };
  if (layout !== 0) attrs.layout = layout;
  if (o.clip ?? r() < 0.3) attrs.clip = 0.5 + r() * 2;
  if (cell === 'GRU') attrs.linear_before_reset = (o.linearBeforeReset ?? r() < 0.5) ? 1 : 0;
  if (cell === 'LSTM' && (o.inputForget ?? false)) attrs.input_forget = 1;
  if (o.activations ?? r() < 0.4) {
    const names = Array.from({ length: FUNCS[cell] * nd }, () => pick(POOL));
    attrs.activations = names;
    const alphas: number[] = [], betas: number[] = [];
    for (const n of names) {
      // ThresholdedRelu always gets its alpha: its default differs between the standard (1) and onnxruntime (0)
      const always = n === 'ThresholdedRelu';
      if (['HardSigmoid', 'LeakyRelu', 'ScaledTanh', 'Affine', 'Elu', 'ThresholdedRelu'].includes(n) && (always || r() < 0.8)) alphas.push(0.1 + r());
      if (['HardSigmoid', 'ScaledTanh', 'Affine'].includes(n) && r() < 0.8) betas.push(0.1 + r() * 0.5);
    }
    if (alphas.length) attrs.activation_alpha = fs(alphas);
    if (betas.length) attrs.activation_beta = fs(betas);
  }
  const outs = cell === 'LSTM' ? ['Y', 'Y_h', 'Y_c'] : ['Y', 'Y_h'];
  return { ins, attrs, outs, label: `${cell} seed ${seed} seq ${seq} batch ${batch} in ${inSize} hidden ${H} ${direction} layout ${layout}` };
}

/** Swap the first two axes of a row-major tensor (layout 0 <-> layout 1 of X, the states and Y). */
function swap01(dims: number[], data: ArrayLike<number>): { dims: number[]; data: Float64Array } {
  const [a, b] = [dims[0]!, dims[1]!];
  const inner = dims.slice(2).reduce((x, y) => x * y, 1);
  const out = new Float64Array(a * b * inner);
  for (let i = 0; i < a; i++) for (let j = 0; j < b; j++) for (let k = 0; k < inner; k++) out[(j * a + i) * inner + k] = data[(i * b + j) * inner + k]!;
  return { dims: [b, a, ...dims.slice(2)], data: out };
}

/** Compare one random case with onnxruntime-node at layout 0 (outputs, dims, storage types). */
export async function checkCase(cell: Cell, seed: number, opset: number, o: CaseOptions = {}, tol = 1e-5): Promise<void> {
  const c = randomCase(cell, seed, { ...o, layout: 0 });
  await vsOrt(cell, opset, c.ins, c.attrs, c.outs.map((name) => ({ name })), tol);
}

/**
 * layout = 1 (opset 14): onnxruntime's CPU kernels refuse batch-major layout, so the same case runs in
 * onnxruntime at layout 0 and in pleat at layout 1 on the transposed X and initial states; pleat's Y (axes
 * [batch, seq, dir, hidden]) and Y_h/Y_c ([batch, dir, hidden]) must be onnxruntime's with the axes moved.
 */
export async function checkBatchMajor(cell: Cell, seed: number, opset: number, o: CaseOptions = {}, tol = 1e-5): Promise<void> {
  const c = randomCase(cell, seed, { ...o, layout: 0 });
  const g = new GraphBuilder();
  for (const i of c.ins) if (i.name) g.input(i.name, undefined, i.type ?? T.FLOAT);
  for (const n of c.outs) g.output(n);
  g.node(cell, c.ins.map((i) => i.name), c.attrs, { outputs: c.outs });
  const ref = (await runBoth(g, c.ins, opset)).ort;
  const g1 = new GraphBuilder();
  for (const i of c.ins) if (i.name) g1.input(i.name, undefined, i.type ?? T.FLOAT);
  for (const n of c.outs) g1.output(n);
  g1.node(cell, c.ins.map((i) => i.name), { ...c.attrs, layout: 1 }, { outputs: c.outs });
  const model = parseModel(modelBytes(g1, { opset }), '.');
  const feeds = new Map<string, Value>();
  for (const i of c.ins) {
    if (!i.name) continue;
    const batchMajor = ['X', 'initial_h', 'initial_c'].includes(i.name);
    const v = batchMajor ? swap01(i.dims, i.data) : { dims: i.dims, data: Float64Array.from(i.data) };
    feeds.set(i.name, { type: i.type ?? T.FLOAT, dims: v.dims, data: v.data });
  }
  for (const precision of ['float64', 'float32'] as const) {
    const out = runModel(model, feeds, { precision });
    for (const name of c.outs) {
      const r = ref[name]!;
      // Y [seq, dir, batch, hidden] -> [batch, seq, dir, hidden]; states [dir, batch, hidden] -> [batch, dir, hidden]
      let want: { dims: number[]; data: Float64Array };
      if (name === 'Y') {
        const [S, D, B, H] = r.dims as [number, number, number, number];
        const data = new Float64Array(r.data.length);
        for (let s = 0; s < S; s++) for (let d = 0; d < D; d++) for (let b = 0; b < B; b++) for (let h = 0; h < H; h++) {
          data[((b * S + s) * D + d) * H + h] = r.data[((s * D + d) * B + b) * H + h]!;
        }
        want = { dims: [B, S, D, H], data };
      } else want = swap01(r.dims, r.data);
      const got = out.get(name)!;
      expect(got.dims, `${c.label} ${name} dims`).toEqual(want.dims);
      const t = precision === 'float32' ? 4 * tol : tol;
      for (let k = 0; k < want.data.length; k++) {
        expect(Math.abs(got.data[k]! - want.data[k]!), `${c.label} ${name} (${precision}) element ${k}`).toBeLessThanOrEqual(t * Math.max(1, Math.abs(want.data[k]!)));
      }
    }
  }
}
