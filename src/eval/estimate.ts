// What one evaluation of a graph will hold, estimated from the shapes before anything runs: the dims of each
// value the common layers make (Conv, ConvTranspose, pooling, Gemm, MatMul, elementwise, Concat, Flatten,
// Reshape), then the values alive at once when each is dropped after its last reader, in float64. A value whose
// shape depends on data (Resize, Expand, Tile, ConstantOfShape, Range, Pad) or on an operator not listed is
// left out, so the estimate is a lower bound: it never refuses more than evaluation itself would (budget.ts
// checks each allocation as it comes).
import { attrInt, attrInts, attrString, elementCount, type Graph, type Node } from '../graph/ir.js';
import { windowCount } from '../graph/shapes.js';
import { heldStillCall, planOf, type Plan } from './plan.js';

type Dims = number[] | undefined;

export interface Estimate {
  /** Bytes of values alive at once at the worst point, in float64. */
  peakBytes: number;
  /** Bytes of every value the run makes, in float64, as if none were freed (a bound on memory and on work). */
  totalBytes: number;
  /** The largest single value: its node and dims. */
  largest?: { node: string; dims: number[] };
}

const SAME_SHAPE = new Set([
  'BatchNormalization', 'InstanceNormalization', 'LayerNormalization', 'GroupNormalization', 'Relu', 'LeakyRelu',
  'Sigmoid', 'Tanh', 'Clip', 'Elu', 'Selu', 'HardSigmoid', 'HardSwish', 'Softplus', 'Softmax', 'LogSoftmax', 'Gelu',
  'Neg', 'Abs', 'Exp', 'Log', 'Sqrt', 'Reciprocal', 'Floor', 'Ceil', 'Round', 'Erf', 'Cast', 'Identity', 'Dropout',
  'PRelu', 'Sin', 'Cos', 'Not', 'Sign', 'Mish',
]);
const BROADCAST = new Set(['Add', 'Sub', 'Mul', 'Div', 'Pow', 'Max', 'Min', 'Sum', 'Mean', 'Equal', 'Less', 'Greater', 'And', 'Or', 'Where']);

function broadcast(all: Dims[]): Dims {
  if (all.some((d) => d === undefined)) return undefined;
  const rank = Math.max(...all.map((d) => d!.length));
  const out: number[] = [];
  for (let i = 0; i < rank; i++) {
    let v = 1;
    for (const d of all) {
      const x = d![d!.length - rank + i];
      if (x !== undefined && x !== 1) v = x;
    }
    out.push(v);
  }
  return out;
}

/** Output spatial sizes of a sliding window (Conv, pooling), per the ONNX operator documentation's formulas. */
function window(node: Node, x: number[], kernel: number[], ceil = false): number[] {
  const n = kernel.length;
  const strides = attrInts(node, 'strides') ?? new Array(n).fill(1);
  const dil = attrInts(node, 'dilations') ?? new Array(n).fill(1);
  const pads = attrInts(node, 'pads') ?? new Array(2 * n).fill(0);
  const auto = attrString(node, 'auto_pad') ?? 'NOTSET';
  return kernel.map((k, i) => {
    const len = x[2 + i]!, s = strides[i] ?? 1;
    if (auto === 'SAME_UPPER' || auto === 'SAME_LOWER') return Math.ceil(len / s);
    const span = (dil[i] ?? 1) * (k - 1) + 1;
    if (auto === 'VALID') return windowCount(len, span, s, 0, 0, ceil);
    return windowCount(len, span, s, pads[i] ?? 0, pads[i + n] ?? 0, ceil);
  });
}

function outputDims(node: Node, ins: Dims[], constDims: (name: string) => Dims): Dims {
  const x = ins[0];
  const op = node.domain === '' || node.domain === 'ai.onnx' ? node.opType : '';
  if (SAME_SHAPE.has(op)) return x;
  if (BROADCAST.has(op)) return broadcast(ins.filter((_, i) => node.inputs[i] !== ''));
  if (!x) return undefined;
  switch (op) {
    case 'Conv': {
      const w = ins[1] ?? constDims(node.inputs[1]!);
      if (!w || x.length < 3) return undefined;
      const kernel = attrInts(node, 'kernel_shape') ?? w.slice(2);
      return [x[0]!, w[0]!, ...window(node, x, kernel)];
    }
    case 'ConvTranspose': {
      const w = ins[1] ?? constDims(node.inputs[1]!);
      if (!w || x.length < 3) return undefined;
      const group = attrInt(node, 'group', 1);
      const kernel = attrInts(node, 'kernel_shape') ?? w.slice(2);
      const given = attrInts(node, 'output_shape');
      if (given) return [x[0]!, w[1]! * group, ...given.slice(-kernel.length)];
      const n = kernel.length;
      const strides = attrInts(node, 'strides') ?? new Array(n).fill(1);
      const dil = attrInts(node, 'dilations') ?? new Array(n).fill(1);
      const pads = attrInts(node, 'pads') ?? new Array(2 * n).fill(0);
      const extra = attrInts(node, 'output_padding') ?? new Array(n).fill(0);
      return [x[0]!, w[1]! * group, ...kernel.map((k, i) =>
        (strides[i] ?? 1) * (x[2 + i]! - 1) + (extra[i] ?? 0) + ((k - 1) * (dil[i] ?? 1) + 1) - (pads[i] ?? 0) - (pads[i + n] ?? 0))];
    }
    case 'MaxPool': case 'AveragePool': case 'LpPool': {
      const kernel = attrInts(node, 'kernel_shape');
      if (!kernel || x.length < 3) return undefined;
      return [x[0]!, x[1]!, ...window(node, x, kernel, attrInt(node, 'ceil_mode', 0) === 1)];
    }
    case 'GlobalAveragePool': case 'GlobalMaxPool': case 'GlobalLpPool':
      return [x[0]!, x[1]!, ...x.slice(2).map(() => 1)];
    case 'Gemm': {
      const b = ins[1] ?? constDims(node.inputs[1]!);
      if (!b || x.length !== 2 || b.length !== 2) return undefined;
      const m = attrInt(node, 'transA', 0) ? x[1]! : x[0]!;
      const n = attrInt(node, 'transB', 0) ? b[0]! : b[1]!;
      return [m, n];
    }
    case 'MatMul': {
      const b = ins[1] ?? constDims(node.inputs[1]!);
      if (!b || x.length < 2 || b.length < 2) return undefined;
      const batch = broadcast([x.slice(0, -2), b.slice(0, -2)])!;
      return [...batch, x[x.length - 2]!, b[b.length - 1]!];
    }
    case 'Flatten': {
      let axis = attrInt(node, 'axis', 1);
      if (axis < 0) axis += x.length;
      return [elementCount(x.slice(0, axis)), elementCount(x.slice(axis))];
    }
    case 'Reshape': case 'Squeeze': case 'Unsqueeze':
      return [elementCount(x)]; // same number of elements, whatever the new dims
    case 'Concat': {
      if (ins.some((d) => d === undefined)) return undefined;
      let axis = attrInt(node, 'axis', 0);
      if (axis < 0) axis += x.length;
      const out = [...x];
      out[axis] = ins.reduce((a, d) => a + (d![axis] ?? 0), 0);
      return out;
    }
    default:
      return undefined;
  }
}

// While graphs are held still (a comparison), an estimate asked for twice is worked out once.
const kept = new WeakMap<Plan, { call: number; byDims: Map<string, Estimate> }>();

/** Estimate one evaluation of `g` given the dims of its inputs. Subgraphs (If, Loop) are not entered. */
export function estimateRun(g: Graph, inputDims: ReadonlyMap<string, number[]>): Estimate {
  const plan = planOf(g);
  const call = heldStillCall();
  if (call === undefined) return estimate(g, plan, inputDims);
  let k = kept.get(plan);
  if (!k || k.call !== call) { k = { call, byDims: new Map() }; kept.set(plan, k); }
  const key = JSON.stringify([...inputDims]);
  let e = k.byDims.get(key);
  if (!e) { e = estimate(g, plan, inputDims); k.byDims.set(key, e); }
  return { ...e, ...(e.largest ? { largest: { node: e.largest.node, dims: [...e.largest.dims] } } : {}) };
}

function estimate(g: Graph, plan: Plan, inputDims: ReadonlyMap<string, number[]>): Estimate {
  // by slot (plan.ts): the dims of each value while it is alive, and the last node reading it (inputs only)
  const { inStart, inSlot, keep } = plan;
  const dims: Dims[] = new Array(plan.names.length);
  const constDims = (name: string): Dims => { const s = plan.slotOf.get(name); return s === undefined ? undefined : plan.init[s]?.dims; };
  const nodes = g.nodes;
  const lastUse = new Int32Array(plan.names.length).fill(-1);
  for (let i = 0; i < nodes.length; i++) for (let k = inStart[i]!; k < inStart[i + 1]!; k++) { const s = inSlot[k]!; if (s >= 0) lastUse[s] = i; }
  const bytes = (d: Dims) => (d ? elementCount(d) * 8 : 0);
  let live = 0;
  for (const [k, v] of inputDims) {
    live += bytes(v);
    const s = plan.slotOf.get(k);
    if (s !== undefined) dims[s] = v;
  }
  let peak = live;
  let total = live;
  let largest: Estimate['largest'];
  for (let i = 0; i < nodes.length; i++) {
    const n = nodes[i]!;
    const a = inStart[i]!, b = inStart[i + 1]!;
    const ins: Dims[] = new Array(b - a);
    for (let k = a; k < b; k++) { const s = inSlot[k]!; ins[k - a] = s < 0 ? undefined : dims[s] ?? plan.init[s]?.dims; }
    const out = outputDims(n, ins, constDims);
    const o = n.outputs[0];
    if (o && out) {
      dims[plan.outSlot[plan.outStart[i]!]!] = out;
      live += bytes(out);
      total += bytes(out);
      if (!largest || bytes(out) > elementCount(largest.dims) * 8) largest = { node: n.name || n.opType, dims: out };
    }
    peak = Math.max(peak, live);
    for (let k = a; k < b; k++) {
      const s = inSlot[k]!;
      if (s >= 0 && lastUse[s] === i && !keep[s] && dims[s] !== undefined) { live -= bytes(dims[s]); dims[s] = undefined; }
    }
  }
  return { peakBytes: peak, totalBytes: total, largest };
}
