// Shapes propagated through a graph from its inputs, for when value_info is missing: the fold rules need the
// rank (and so the channel axis) of an activation, which a model often declares only for its inputs. Each op's
// rule follows the ONNX operator documentation for its output shape; an op without a rule here, or a shape that
// depends on values computed at run time, leaves its outputs unknown (and whatever is read from them).
// A dim that is not known (a symbolic dim no flag sizes) is -1: the rank is still known.
import type { Graph, Node, Tensor } from './ir.js';
import { attrInt, attrInts, attrString, hasSubgraphs } from './ir.js';
import { constantNodeTensor } from './constants.js';
import { tensorToFloat64 } from './tensor.js';
import { nodeNeeds, topoOrder } from './topo.js';
import { nameTable, type NameTable } from './names.js';
import { keptIds } from './kept-ids.js';

export type Shape = number[];

const SAME_SHAPE = new Set([
  'Relu', 'LeakyRelu', 'PRelu', 'Sigmoid', 'Tanh', 'HardSigmoid', 'HardSwish', 'Elu', 'Selu', 'Celu', 'Gelu', 'Erf',
  'Softplus', 'Softsign', 'Clip', 'Identity', 'Dropout', 'Abs', 'Neg', 'Exp', 'Log', 'Sqrt', 'Reciprocal', 'Cast',
  'Softmax', 'LogSoftmax', 'BatchNormalization', 'InstanceNormalization', 'LayerNormalization', 'GroupNormalization',
  'LpNormalization', 'LRN', 'MeanVarianceNormalization', 'Floor', 'Ceil', 'Round', 'Sign', 'Mish', 'Not', 'Sin', 'Cos',
  'IsNaN', 'IsInf', 'CastLike', 'Hardmax', 'ThresholdedRelu', 'Shrink',
]);
const BROADCASTING = new Set(['Add', 'Sub', 'Mul', 'Div', 'Pow', 'Max', 'Min', 'Sum', 'Mean', 'Where', 'Equal', 'Less', 'Greater', 'LessOrEqual', 'GreaterOrEqual', 'And', 'Or', 'Xor', 'Mod', 'BitShift']);
const REDUCE = new Set(['ReduceMean', 'ReduceSum', 'ReduceMax', 'ReduceMin', 'ReduceProd', 'ReduceL1', 'ReduceL2', 'ReduceLogSum', 'ReduceLogSumExp', 'ReduceSumSquare']);
const POOL = new Set(['MaxPool', 'AveragePool', 'LpPool']);
const GLOBAL_POOL = new Set(['GlobalAveragePool', 'GlobalMaxPool', 'GlobalLpPool']);

/** numpy-style broadcast of several shapes (ONNX Broadcasting in ONNX); -1 where a dim is not known. */
export function broadcastShapes(shapes: Shape[]): Shape {
  const rank = Math.max(0, ...shapes.map((s) => s.length));
  const out: Shape = [];
  for (let i = 0; i < rank; i++) {
    let d = 1;
    for (const s of shapes) {
      const v = s[s.length - rank + i];
      if (v === undefined || v === 1) continue;
      d = v === -1 || d === -1 ? (d === 1 ? v : d === v ? d : -1) : v;
    }
    out.push(d);
  }
  return out;
}

const normAxis = (a: number, rank: number) => (a < 0 ? a + rank : a);

/**
 * The shape of every value of `g` that can be worked out from its inputs: `inputs` gives a shape for some
 * graph inputs (given ones, or the probe's defaults); the other inputs use their declared shape (symbolic dims as
 * -1). `outer` holds the shapes of values an enclosing graph defines.
 */
export function inferShapes(g: Graph, inputs: ReadonlyMap<string, Shape> = new Map(), outer?: ShapeLookup): ShapeLookup {
  const names = new GraphNames(g);
  const start = () => {
    const shapes = new ShapeTable(names, outer);
    for (const vi of g.inputs) {
      const given = inputs.get(vi.name);
      if (given) shapes.set(vi.name, [...given]);
      else if (vi.shape && !shapes.has(vi.name)) shapes.set(vi.name, vi.shape.map((d) => (typeof d === 'number' && d >= 0 ? d : -1)));
    }
    return { shapes, constants: new Constants(names) };
  };
  // The common case, a graph in topological order, in list order and one pass: a node reading a value that is
  // neither shaped nor defined yet (one a later node makes) sends the whole graph through topoOrder instead,
  // which gives the same order for a sorted graph.
  const first = start();
  const unshaped = new Set<string>(); // values defined so far without a shape
  for (const vi of g.inputs) if (!first.shapes.has(vi.name)) unshaped.add(vi.name);
  if (propagate(g.nodes, first.shapes, first.constants, unshaped)) return first.shapes;
  const { shapes, constants } = start();
  let order: Node[];
  try { order = topoOrder(g); } catch { order = g.nodes; }
  propagate(order, shapes, constants, undefined);
  return shapes;
}

/** What inferShapes answers: the shape of a value by name (get), and whether it has one (has). */
export interface ShapeLookup {
  get(k: string): Shape | undefined;
  has(k: string): boolean;
}

/**
 * The names a graph defines (initializers, inputs, node outputs), each with an id, and the initializer of each
 * (the last of a name, as a map by name would keep): a flat name table (names.ts) instead of maps, since a graph
 * of 10^5 nodes has several hundred thousand names.
 */
class GraphNames {
  readonly ids: NameTable;
  readonly init: Array<Tensor | undefined>;
  constructor(g: Graph) {
    // a graph still exactly as validation numbered it (kept-ids.ts): its names are not hashed again
    const kept = keptIds(g);
    if (kept) {
      this.ids = kept.table;
      this.init = new Array<Tensor | undefined>(kept.table.size).fill(undefined);
      for (let i = 0; i < g.initializers.length; i++) this.init[kept.tensorIds[i]!] = g.initializers[i]!;
      return;
    }
    let bound = g.initializers.length + g.inputs.length;
    for (const n of g.nodes) bound += n.outputs.length;
    const ids = this.ids = nameTable(Math.max(bound, 1));
    this.init = new Array<Tensor | undefined>(bound).fill(undefined);
    for (const t of g.initializers) this.init[ids.add(t.name)] = t;
    for (const vi of g.inputs) ids.add(vi.name);
    for (const n of g.nodes) for (const o of n.outputs) if (o) ids.add(o);
  }
}

/**
 * Shapes by value name: those set here (inputs, node outputs), else an initializer's dims (a copy each time: a
 * weight is read once or twice, and nothing is copied up front), else the enclosing graph's.
 */
class ShapeTable implements ShapeLookup {
  private readonly own: Array<Shape | undefined>;
  constructor(private readonly names: GraphNames, private readonly outer: ShapeLookup | undefined) {
    this.own = new Array<Shape | undefined>(names.ids.size).fill(undefined);
  }
  get(k: string): Shape | undefined {
    // (a name that is no string, e.g. a missing input, has no shape, as a map would answer)
    const id = typeof k === 'string' ? this.names.ids.id(k) : -1;
    if (id >= 0) {
      const own = this.own[id];
      if (own !== undefined) return own;
      const t = this.names.init[id];
      if (t) return t.dims.slice();
    }
    return this.outer?.get(k);
  }
  has(k: string): boolean { return this.get(k) !== undefined; }
  /** `k` is a name the graph defines (an input or a node output). */
  set(k: string, shape: Shape): void { this.own[this.names.ids.id(k)] = shape; }
}

/** Constant tensors by name: Constant nodes' outputs, then the initializers. */
class Constants {
  private readonly made = new Map<string, Tensor>();
  constructor(private readonly names: GraphNames) {}
  get(k: string): Tensor | undefined {
    const t = this.made.size ? this.made.get(k) : undefined;
    if (t) return t;
    const id = typeof k === 'string' ? this.names.ids.id(k) : -1;
    return id >= 0 ? this.names.init[id] : undefined;
  }
  set(k: string, t: Tensor): void { this.made.set(k, t); }
}

/**
 * Shapes of `order`'s outputs into `shapes`. With `unshaped` (the list-order pass): false when a node reads a
 * value a later node makes. A value nothing makes (a fold's new weight not yet added) is only unknown, as it is
 * in any order.
 */
function propagate(order: readonly Node[], shapes: ShapeTable, constants: Constants, unshaped: Set<string> | undefined): boolean {
  const undefinedYet = new Set<string>();
  // (plain loops: this runs once per node of graphs of 10^5 nodes)
  for (const n of order) {
    const inputs = n.inputs, outputs = n.outputs;
    const ins = new Array<Shape | undefined>(inputs.length);
    for (let k = 0; k < inputs.length; k++) { const v = inputs[k]!; ins[k] = v ? shapes.get(v) : undefined; }
    if (unshaped) {
      for (let k = 0; k < inputs.length; k++) { const v = inputs[k]!; if (v && ins[k] === undefined && !unshaped.has(v)) undefinedYet.add(v); }
      if (hasSubgraphs(n)) for (const v of nodeNeeds(n)) if (!shapes.has(v) && !unshaped.has(v)) undefinedYet.add(v);
    }
    const out = nodeShape(n, ins, constants);
    if (out && outputs[0]) shapes.set(outputs[0], out);
    if (unshaped) {
      let readEarlier = false;
      for (let k = 0; k < outputs.length; k++) {
        const o = outputs[k]!;
        if (!o) continue;
        if (undefinedYet.size > 0 && undefinedYet.has(o)) { readEarlier = true; continue; } // read before it was made: not in order
        if (!(k === 0 && out)) unshaped.add(o);
      }
      if (readEarlier) return false;
    }
  }
  return true;
}

/** The shape of a node's first output from its inputs' shapes (a Constant's tensor is kept in `constants` too). */
function nodeShape(n: Node, ins: Array<Shape | undefined>, constants: Constants): Shape | undefined {
  if (n.opType === 'Constant') {
    const t = constantNodeTensor(n);
    if (t && n.outputs[0]) { constants.set(n.outputs[0], t); return [...t.dims]; }
    return undefined;
  }
  if (n.domain !== '' && n.domain !== 'ai.onnx') return undefined;
  const values = (i: number): number[] | undefined => {
    const t = n.inputs[i] ? constants.get(n.inputs[i]!) : undefined;
    return t ? Array.from(tensorToFloat64(t)) : undefined;
  };
  try { return outputShape(n, ins, values); } catch { return undefined; }
}

function outputShape(n: Node, ins: Array<Shape | undefined>, values: (i: number) => number[] | undefined): Shape | undefined {
  const x = ins[0];
  const op = n.opType;
  if (SAME_SHAPE.has(op)) return x && [...x];
  if (BROADCASTING.has(op)) return ins.every((s) => s !== undefined) ? broadcastShapes(ins as Shape[]) : undefined;
  if (!x) return undefined;
  switch (op) {
    case 'Conv': case 'ConvTranspose': case 'MaxPool': case 'AveragePool': case 'LpPool': return windowShape(n, x, ins[1]);
    case 'Gemm': {
      const b = ins[1];
      if (!b || x.length !== 2 || b.length !== 2) return undefined;
      return [attrInt(n, 'transA', 0) ? x[1]! : x[0]!, attrInt(n, 'transB', 0) ? b[0]! : b[1]!];
    }
    case 'MatMul': {
      const b = ins[1];
      if (!b) return undefined;
      if (x.length === 1 && b.length === 1) return [];
      if (x.length === 1) return [...b.slice(0, -2), b[b.length - 1]!];
      if (b.length === 1) return x.slice(0, -1);
      return [...broadcastShapes([x.slice(0, -2), b.slice(0, -2)]), x[x.length - 2]!, b[b.length - 1]!];
    }
    case 'Flatten': {
      const a = normAxis(attrInt(n, 'axis', 1), x.length);
      const prod = (s: Shape) => (s.some((d) => d < 0) ? -1 : s.reduce((p, d) => p * d, 1));
      return [prod(x.slice(0, a)), prod(x.slice(a))];
    }
    case 'Reshape': {
      const target = values(1);
      if (!target) return undefined;
      const allowZero = attrInt(n, 'allowzero', 0) === 1;
      const out = target.map((d, i) => (d === 0 && !allowZero ? (x[i] ?? -1) : d));
      const known = out.filter((d) => d !== -1);
      if (out.includes(-1) && !x.some((d) => d < 0)) {
        const total = x.reduce((p, d) => p * d, 1);
        const rest = known.reduce((p, d) => p * d, 1);
        return out.map((d) => (d === -1 && rest > 0 ? total / rest : d));
      }
      return out;
    }
    case 'Transpose': {
      const perm = attrInts(n, 'perm') ?? x.map((_, i) => x.length - 1 - i);
      return perm.map((p) => x[p]!);
    }
    case 'Squeeze': {
      const axes = (attrInts(n, 'axes') ?? values(1))?.map((a) => normAxis(a, x.length));
      if (!axes) return x.some((d) => d < 0) ? undefined : x.filter((d) => d !== 1);
      return x.filter((_, i) => !axes.includes(i));
    }
    case 'Unsqueeze': {
      const raw = attrInts(n, 'axes') ?? values(1);
      if (!raw) return undefined;
      const rank = x.length + raw.length;
      const axes = raw.map((a) => normAxis(a, rank));
      const out: Shape = [];
      for (let i = 0, j = 0; i < rank; i++) out.push(axes.includes(i) ? 1 : x[j++]!);
      return out;
    }
    case 'Concat': {
      if (ins.some((s) => !s)) return undefined;
      const a = normAxis(attrInt(n, 'axis', 0), x.length);
      const out = [...x];
      out[a] = (ins as Shape[]).some((s) => s[a]! < 0) ? -1 : (ins as Shape[]).reduce((p, s) => p + s[a]!, 0);
      return out;
    }
    case 'Shape': return [x.length];
    case 'Pad': {
      const pads = attrInts(n, 'pads') ?? values(1);
      if (!pads || pads.length !== 2 * x.length) return undefined;
      return x.map((d, i) => (d < 0 ? -1 : d + pads[i]! + pads[i + x.length]!));
    }
    default:
      if (REDUCE.has(op)) {
        const axes = (attrInts(n, 'axes') ?? values(1))?.map((a) => normAxis(a, x.length));
        const keep = attrInt(n, 'keepdims', 1) === 1;
        const all = !axes || axes.length === 0;
        if (all && attrInt(n, 'noop_with_empty_axes', 0) === 1) return [...x];
        const reduced = (i: number) => all || axes!.includes(i);
        return keep ? x.map((d, i) => (reduced(i) ? 1 : d)) : x.filter((_, i) => !reduced(i));
      }
      if (GLOBAL_POOL.has(op)) return [x[0]!, x[1]!, ...x.slice(2).map(() => 1)];
      if (POOL.has(op)) return windowShape(n, x, undefined);
      return undefined;
  }
}

/**
 * Number of window positions along one axis of length n (ONNX Operators, Conv / MaxPool / AveragePool output
 * shape): floor((n + pads - dk) / s) + 1, or ceil(...) + 1 with ceil_mode, where a last window that would start
 * past the input and its begin padding is dropped, as onnxruntime does. auto_pad=VALID is this with zero pads, which
 * makes ceil_mode's count ceil((n - dk + 1) / s), the VALID formula of the MaxPool operator doc.
 */
export function windowCount(n: number, dk: number, s: number, padBegin: number, padEnd: number, ceil: boolean): number {
  const span = n + padBegin + padEnd - dk;
  if (!ceil) return Math.floor(span / s) + 1;
  const o = Math.ceil(span / s) + 1;
  return (o - 1) * s >= n + padBegin ? o - 1 : o;
}

/** Conv, ConvTranspose and pooling output shapes (ONNX Operators, Conv / ConvTranspose / MaxPool). */
function windowShape(n: Node, x: Shape, w: Shape | undefined): Shape | undefined {
  const conv = n.opType === 'Conv' || n.opType === 'ConvTranspose';
  if (conv && !w) return undefined;
  const spatial = x.length - 2;
  if (spatial < 0) return undefined;
  const kernel = conv ? w!.slice(2) : attrInts(n, 'kernel_shape');
  if (!kernel || kernel.length !== spatial) return undefined;
  const strides = attrInts(n, 'strides') ?? kernel.map(() => 1);
  const dil = attrInts(n, 'dilations') ?? kernel.map(() => 1);
  const pads = attrInts(n, 'pads') ?? kernel.map(() => 0).concat(kernel.map(() => 0));
  const autoPad = attrString(n, 'auto_pad', 'NOTSET');
  const group = attrInt(n, 'group', 1);
  const channels = n.opType === 'Conv' ? w![0]! : n.opType === 'ConvTranspose' ? w![1]! * group : x[1]!;
  const out: Shape = [x[0]!, channels];
  for (let i = 0; i < spatial; i++) {
    const d = x[i + 2]!;
    if (d < 0) { out.push(-1); continue; }
    const k = (kernel[i]! - 1) * dil[i]! + 1;
    if (n.opType === 'ConvTranspose') {
      const given = attrInts(n, 'output_shape');
      if (given) { out.push(given[given.length - spatial + i]!); continue; }
      const op = attrInts(n, 'output_padding')?.[i] ?? 0;
      if (autoPad === 'SAME_UPPER' || autoPad === 'SAME_LOWER') { out.push(d * strides[i]!); continue; }
      out.push(strides[i]! * (d - 1) + op + k - pads[i]! - pads[i + spatial]!);
      continue;
    }
    if (autoPad === 'SAME_UPPER' || autoPad === 'SAME_LOWER') { out.push(Math.ceil(d / strides[i]!)); continue; }
    const valid = autoPad === 'VALID';
    out.push(windowCount(d, k, strides[i]!, valid ? 0 : pads[i]!, valid ? 0 : pads[i + spatial]!, attrInt(n, 'ceil_mode', 0) === 1));
  }
  return out;
}
