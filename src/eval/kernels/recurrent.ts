// Shared machinery of the recurrent kernels (RNN, GRU, LSTM; ONNX opsets 1-22): directions, the layout
// attribute (opset 14), sequence_lens, initial states, the activations/activation_alpha/activation_beta lists and
// clip. Each cell's equations live in its own module (rnn.ts, gru.ts, lstm.ts).
import { attrFloat, attrFloats, attrInt, attrString, type Node } from '../../graph/ir.js';
import { allocFloat, badModel, need, unsupported } from '../attrs.js';
import type { KernelContext, NumArray, Value } from '../value.js';
import { gemm } from '../gemm.js';

export type Activation = (x: number) => number;

interface ActivationForm { alpha?: number; beta?: number; make: (a: number, b: number) => Activation }

// The activation functions the ONNX recurrent operators name. Defaults for alpha/beta are those of the ONNX
// operator of the same name, as the operator docs say (LeakyRelu 0.01, ThresholdedRelu 1, HardSigmoid 0.2/0.5,
// Elu 1; onnxruntime 1.30 agrees except for ThresholdedRelu, where it uses 0). Affine and ScaledTanh are no
// longer ONNX operators, so the standard gives them no default: pleat uses onnxruntime's, alpha = beta = 0
// (measured with onnxruntime-node 1.30).
const ACTIVATIONS: Record<string, ActivationForm> = {
  relu: { make: () => (x) => (x > 0 ? x : 0) },
  tanh: { make: () => Math.tanh },
  sigmoid: { make: () => (x) => (x >= 0 ? 1 / (1 + Math.exp(-x)) : Math.exp(x) / (1 + Math.exp(x))) },
  affine: { alpha: 0, beta: 0, make: (a, b) => (x) => a * x + b },
  leakyrelu: { alpha: 0.01, make: (a) => (x) => (x >= 0 ? x : a * x) },
  thresholdedrelu: { alpha: 1, make: (a) => (x) => (x > a ? x : 0) },
  scaledtanh: { alpha: 0, beta: 0, make: (a, b) => (x) => a * Math.tanh(b * x) },
  hardsigmoid: { alpha: 0.2, beta: 0.5, make: (a, b) => (x) => Math.max(0, Math.min(1, a * x + b)) },
  elu: { alpha: 1, make: (a) => (x) => (x >= 0 ? x : a * Math.expm1(x)) },
  softsign: { make: () => (x) => x / (1 + Math.abs(x)) },
  softplus: { make: () => (x) => (x > 0 ? x + Math.log1p(Math.exp(-x)) : Math.log1p(Math.exp(x))) },
};

/** Everything a cell needs besides its weights, read from the node's inputs and attributes. */
export interface Recurrence {
  seq: number;
  batch: number;
  inSize: number;
  hidden: number;
  numDir: number;
  /** Per direction: whether it runs from the last valid step back to the first. */
  reverse: boolean[];
  layout: number;
  /**
   * Valid steps per batch entry (sequence_lens, or seq everywhere). Y is zero past each entry's end. For a
   * zero-length entry the standard says nothing about Y_h/Y_c; pleat gives zeros, as onnxruntime 1.30 does
   * (measured), rather than the initial state.
   */
  lens: number[];
  /** Activation functions per direction, `perDir` of them each. */
  acts: Activation[][];
  /** Gate pre-activations are clipped to [-clip, clip] when set. */
  clip: number | undefined;
  X: Value;
  W: Value;
  R: Value;
  B: Value | undefined;
}

/** The gate activations of one direction: the attribute's names (and alpha/beta lists) or the defaults. */
function activations(ctx: KernelContext, node: Node, defaults: string[], numDir: number): Activation[][] {
  const a = node.attributes.find((x) => x.name === 'activations');
  let names: string[] = [];
  if (a && a.value.type === 'STRINGS') names = a.value.strings.map((s) => new TextDecoder().decode(s));
  if (names.length === 0) names = Array.from({ length: numDir }, () => defaults).flat();
  // a single direction's list given for a bidirectional node applies to both directions (as onnxruntime does)
  if (numDir === 2 && names.length === defaults.length) names = [...names, ...names];
  if (names.length !== defaults.length * numDir) {
    throw badModel(ctx, `activations lists ${names.length} functions; ${defaults.length * numDir} expected for ${numDir} direction(s)`);
  }
  // alpha and beta values are consumed in order by the functions that take them
  const alphas = attrFloats(node, 'activation_alpha') ?? [], betas = attrFloats(node, 'activation_beta') ?? [];
  let ai = 0, bi = 0;
  const fns = names.map((name) => {
    const form = ACTIVATIONS[name.toLowerCase()];
    if (!form) throw unsupported(ctx, `activation function '${name}'`);
    const alpha = form.alpha === undefined ? 0 : ai < alphas.length ? alphas[ai++]! : form.alpha;
    const beta = form.beta === undefined ? 0 : bi < betas.length ? betas[bi++]! : form.beta;
    return form.make(alpha, beta);
  });
  return Array.from({ length: numDir }, (_, d) => fns.slice(d * defaults.length, (d + 1) * defaults.length));
}

/**
 * Read the inputs every recurrent operator shares: X, W, R, B, sequence_lens (input 4). `gates` is the number
 * of gate blocks stacked in W and R (RNN 1, GRU 3, LSTM 4).
 */
export function recurrence(inputs: Array<Value | undefined>, ctx: KernelContext, gates: number, defaults: string[]): Recurrence {
  const node = ctx.node;
  const X = need(inputs, 0, ctx, 'X'), W = need(inputs, 1, ctx, 'W'), R = need(inputs, 2, ctx, 'R');
  const direction = attrString(node, 'direction', 'forward');
  const numDir = direction === 'bidirectional' ? 2 : 1;
  if (direction !== 'forward' && direction !== 'reverse' && direction !== 'bidirectional') {
    throw badModel(ctx, `direction '${direction}' is not forward, reverse or bidirectional`);
  }
  const layout = ctx.opset >= 14 ? attrInt(node, 'layout', 0) : 0;
  if (layout !== 0 && layout !== 1) throw badModel(ctx, `layout ${layout} is not 0 or 1`);
  if (X.dims.length !== 3) throw badModel(ctx, `X has rank ${X.dims.length}; it must be 3-D`);
  const [seq, batch] = layout === 0 ? [X.dims[0]!, X.dims[1]!] : [X.dims[1]!, X.dims[0]!];
  const inSize = X.dims[2]!;
  if (R.dims.length !== 3) throw badModel(ctx, `R has rank ${R.dims.length}; it must be 3-D`);
  const hidden = attrInt(node, 'hidden_size') ?? R.dims[2]!;
  const want = (v: Value, name: string, dims: number[]) => {
    if (v.dims.join(',') !== dims.join(',')) throw badModel(ctx, `${name} has dims [${v.dims.join(',')}]; expected [${dims.join(',')}]`);
  };
  want(W, 'W', [numDir, gates * hidden, inSize]);
  want(R, 'R', [numDir, gates * hidden, hidden]);
  const B = inputs[3];
  if (B) want(B, 'B', [numDir, 2 * gates * hidden]);
  const lens = new Array<number>(batch).fill(seq);
  const sl = inputs[4];
  if (sl) {
    want(sl, 'sequence_lens', [batch]);
    for (let b = 0; b < batch; b++) {
      const L = sl.data[b]!;
      if (!Number.isInteger(L) || L < 0 || L > seq) throw badModel(ctx, `sequence_lens[${b}] = ${L} is outside [0, ${seq}]`);
      lens[b] = L;
    }
  }
  const clipAttr = attrFloat(node, 'clip');
  const reverse = direction === 'bidirectional' ? [false, true] : [direction === 'reverse'];
  return { seq, batch, inSize, hidden, numDir, reverse, layout, lens, acts: activations(ctx, node, defaults, numDir), clip: clipAttr, X, W, R, B };
}

/** Offset of a state tensor's [d, b, 0] (initial_h, initial_c, Y_h, Y_c) for the layout. */
export function stateOffset(r: Recurrence, d: number, b: number): number {
  return (r.layout === 0 ? d * r.batch + b : b * r.numDir + d) * r.hidden;
}

/** Offset of Y[t, d, b, 0] for the layout. */
export function yOffset(r: Recurrence, t: number, d: number, b: number): number {
  return (r.layout === 0 ? (t * r.numDir + d) * r.batch + b : (b * r.seq + t) * r.numDir + d) * r.hidden;
}

export function stateDims(r: Recurrence): number[] {
  return r.layout === 0 ? [r.numDir, r.batch, r.hidden] : [r.batch, r.numDir, r.hidden];
}

export function yDims(r: Recurrence): number[] {
  return r.layout === 0 ? [r.seq, r.numDir, r.batch, r.hidden] : [r.batch, r.seq, r.numDir, r.hidden];
}

/** An initial state input (initial_h, initial_c) checked for shape, or undefined (zeros). */
export function initialState(inputs: Array<Value | undefined>, i: number, r: Recurrence, ctx: KernelContext, name: string): Value | undefined {
  const v = inputs[i];
  if (v && v.dims.join(',') !== stateDims(r).join(',')) {
    throw badModel(ctx, `${name} has dims [${v.dims.join(',')}]; expected [${stateDims(r).join(',')}]`);
  }
  return v;
}

/** A state of one direction and batch entry as a float64 vector, from an initial-state input or zeros. */
export function startState(v: Value | undefined, r: Recurrence, d: number, b: number): Float64Array {
  const s = new Float64Array(r.hidden);
  if (v) { const o = stateOffset(r, d, b); for (let j = 0; j < r.hidden; j++) s[j] = v.data[o + j]!; }
  return s;
}

/**
 * The input part of every gate's pre-activation for every step at once, through the shared GEMM:
 * row q (X's rows in memory order, see xRow) holds x·W[g] + Wb[g] (+ Rb[g] for the first `rGates` blocks, whose
 * recurrent term is added per step by addRecurrent; GRU's hidden gate takes its Rb separately).
 */
export function inputProjection(r: Recurrence, gates: number, d: number, rGates: number): Float64Array {
  const I = r.inSize, G = gates * r.hidden, rows = r.seq * r.batch;
  const out = new Float64Array(rows * G);
  gemm(rows, G, I, { data: r.X.data, off: 0, rs: I, cs: 1 }, { data: r.W.data, off: d * G * I, rs: 1, cs: I }, out, 0, G, false);
  if (r.B) {
    const bias = new Float64Array(G);
    for (let g = 0; g < G; g++) bias[g] = r.B.data[d * 2 * G + g]! + (g < rGates * r.hidden ? r.B.data[d * 2 * G + G + g]! : 0);
    for (let q = 0; q < rows; q++) for (let g = 0; g < G; g++) out[q * G + g]! += bias[g]!;
  }
  return out;
}

/** Row of X[t, b] in inputProjection's result (X's memory order for the layout). */
export function xRow(r: Recurrence, t: number, b: number): number {
  return r.layout === 0 ? t * r.batch + b : b * r.seq + t;
}

/**
 * One step's pre-activations into `out` (length gates*H): the projected input row plus h·R[g] for the first
 * `rGates` gate blocks.
 */
export function stepPreActivations(r: Recurrence, gates: number, d: number, xw: Float64Array, row: number, h: Float64Array, rGates: number, out: Float64Array): void {
  const H = r.hidden, G = gates * H, rw = recurrentWeights(r), ro = d * G * H, rG = rGates * H;
  for (let g = 0; g < G; g++) out[g] = xw[row * G + g]!;
  for (let g = 0; g < rG; g++) out[g]! += dot(h, rw, ro + g * H, H);
}

/** R as one Float64Array (cached per value), so the per-step dot products read a single array type. */
const rCache = new WeakMap<object, Float64Array>();
export function recurrentWeights(r: Recurrence): Float64Array {
  const data = r.R.data;
  if (data instanceof Float64Array) return data;
  let c = rCache.get(data);
  if (!c) { c = Float64Array.from(data); rCache.set(data, c); }
  return c;
}

/** h · w[off .. off+n), unrolled by four (the recurrent product is most of a recurrent layer's work). */
export function dot(h: Float64Array, w: Float64Array, off: number, n: number): number {
  let a0 = 0, a1 = 0, a2 = 0, a3 = 0, k = 0;
  for (; k + 3 < n; k += 4) {
    a0 += h[k]! * w[off + k]!;
    a1 += h[k + 1]! * w[off + k + 1]!;
    a2 += h[k + 2]! * w[off + k + 2]!;
    a3 += h[k + 3]! * w[off + k + 3]!;
  }
  for (; k < n; k++) a0 += h[k]! * w[off + k]!;
  return (a0 + a1) + (a2 + a3);
}

/** Clip a pre-activation to [-clip, clip] when the node sets clip. */
export function clipped(r: Recurrence, v: number): number {
  return r.clip === undefined ? v : Math.max(-r.clip, Math.min(r.clip, v));
}

/** Output buffers in the run's precision: Y (zeros past each sequence's end) and one per state output. */
export function outputs(r: Recurrence, ctx: KernelContext, states: number): { Y: NumArray; S: NumArray[] } {
  const Y = allocFloat(r.seq * r.numDir * r.batch * r.hidden, ctx.precision);
  const S = Array.from({ length: states }, () => allocFloat(r.numDir * r.batch * r.hidden, ctx.precision));
  return { Y, S };
}

/** Round a state to float32 in float32 mode, as a float32 runtime holds it between steps. */
export function settle(v: Float64Array, ctx: KernelContext): void {
  if (ctx.precision === 'float32') for (let j = 0; j < v.length; j++) v[j] = Math.fround(v[j]!);
}

/** The time steps one direction visits for a sequence of `len` valid steps. */
export function steps(len: number, reverse: boolean): number[] {
  return Array.from({ length: len }, (_, i) => (reverse ? len - 1 - i : i));
}
