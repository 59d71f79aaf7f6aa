// Cross-layer equalization (opt-in: fold --equalize). Folding a normalization scales each output channel of a
// layer by its own factor, so one channel's weights can span a thousand times another's, and one per-tensor
// 8-bit scale then rounds the narrow channels away. When two linear layers are joined only by positively
// homogeneous steps (f(s x) = s f(x) for s > 0: Relu, LeakyRelu, PRelu with a non-negative constant slope, Abs,
// Identity, or nothing), output channel i of the first can be divided by s_i and input channel i of the second
// multiplied by s_i without changing the function. With r1_i the range of the first layer's output channel i and
// r2_i the range of the second layer's input channel i, s_i = sqrt(r1_i * r2_i) / r2_i gives both channels the
// range sqrt(r1_i * r2_i); over a chain of layers the pairs are visited in turn until the scales stop changing
// (Nagel et al. 2019, "Data-Free Quantization Through Weight Equalization and Bias Correction", arXiv:1906.04721,
// section 4.1). Ranges here are max |w| per channel, the quantity a symmetric 8-bit scale is set from.
//
// Like a fold rule: match (every condition a named refusal), then rewrite (scales only), then a numeric proof of
// each chain's region; a chain whose proof fails is put back as it was.
import type { Graph, Node, Tensor } from '../graph/ir.js';
import { attrInt, DataType } from '../graph/ir.js';
import type { Model } from '../graph/ir.js';
import { setTensorValues } from '../graph/edit.js';
import { tensorToFloat64 } from '../graph/tensor.js';
import { buildScopes, constantOf, labelOf, soleReader, type Scope } from './scope.js';
import { layouts, weightView, type ChannelMap } from './weights.js';
import { channelMaxAbs, sqnrOf, type SqnrFigures } from './int8.js';
import { regionGraph } from './apply.js';
import type { ProofCase, RewrittenNode } from './types.js';
import { opsetVersion } from '../graph/ir.js';

/** Why a pair of layers was not equalized. */
export type EqualizeRefusal =
  | 'activation-not-homogeneous'
  | 'axis-mismatch'
  | 'weights-shared'
  | 'overridable-weights'
  | 'params-not-constant'
  | 'dtype-unsupported'
  | 'bias-not-per-channel'
  | 'no-gain'
  | 'proof-failed';

export interface EqualizedPair {
  /** The layer whose output channels were divided, and the one whose input channels were multiplied. */
  first: string;
  second: string;
  /** The steps between them (ledger labels), in data-flow order. */
  through: string[];
  graph: string;
  status: 'equalized' | 'refused';
  reason: EqualizeRefusal | null;
  /** What happened, or what would let it happen. */
  hint: string;
  channels: number;
  /** SQNR of each layer's weights under symmetric 8-bit quantization, before and after (equalized pairs). */
  sqnr: { firstBefore: SqnrFigures; firstAfter: SqnrFigures; secondBefore: SqnrFigures; secondAfter: SqnrFigures } | null;
}

const HOMOGENEOUS = new Set(['Relu', 'LeakyRelu', 'PRelu', 'Abs', 'Identity']);
/** Single-input activations a pair may meet; anything else simply ends the search (not a pair). */
const OTHER_ACTIVATIONS = new Set([
  'Clip', 'Sigmoid', 'Tanh', 'HardSigmoid', 'HardSwish', 'Elu', 'Selu', 'Celu', 'Softplus', 'Softsign', 'Gelu',
  'Mish', 'Erf', 'Exp', 'Log', 'Abs', 'Sqrt', 'ThresholdedRelu',
]);
const LAYERS = new Set(['Conv', 'Gemm', 'MatMul']);
const FLOATS = new Set<number>([DataType.FLOAT, DataType.DOUBLE]);

/** A linear layer's constant weight (and bias) as equalization sees them. */
interface Side {
  node: Node;
  label: string;
  weight: Tensor;
  values: Float64Array;
  dims: number[];
  /** Which channel each weight element belongs to: output channels for the first layer, input for the second. */
  map: ChannelMap;
  /** Output-channel map and count, for the SQNR figures. */
  outMap: ChannelMap;
  outChannels: number;
  bias?: { tensor: Tensor; values: Float64Array };
  /** 'channel-1' (Conv: axis 1 of the activation) or 'last' (Gemm/MatMul: the last axis). */
  axis: 'channel-1' | 'last';
}

type Refused = { refusal: EqualizeRefusal; hint: string };
const refuse = (refusal: EqualizeRefusal, hint: string): Refused => ({ refusal, hint });
const isRefused = (x: unknown): x is Refused => typeof x === 'object' && x !== null && 'refusal' in x;

/** The constant weight of a layer, readable and rewritable by equalization, or why not. */
function constantWeight(scope: Scope, n: Node, at: number, what: string): { tensor: Tensor; values: Float64Array } | Refused {
  const v = n.inputs[at];
  const ref = v ? constantOf(scope, v) : undefined;
  if (!v || !ref) return refuse('params-not-constant', `the ${what} of '${labelOf(scope, n)}' is computed at run time`);
  if (ref.overridable) return refuse('overridable-weights', `the ${what} of '${labelOf(scope, n)}' is a graph input callers may replace`);
  if (ref.constantNode) return refuse('params-not-constant', `the ${what} of '${labelOf(scope, n)}' is a Constant node; store it as an initializer`);
  if (!FLOATS.has(ref.tensor.dataType)) return refuse('dtype-unsupported', `the ${what} of '${labelOf(scope, n)}' is stored as type ${ref.tensor.dataType}, not float32 or float64`);
  if (!soleReader(scope, v, n)) return refuse('weights-shared', `the ${what} '${v}' of '${labelOf(scope, n)}' is also read by another node`);
  return { tensor: ref.tensor, values: tensorToFloat64(ref.tensor) };
}

/** The first layer of a pair: its output channels are divided. */
function firstSide(scope: Scope, n: Node): Side | Refused {
  const w = constantWeight(scope, n, 1, 'weight');
  if (isRefused(w)) return w;
  const dims = [...w.tensor.dims];
  const v = weightView(dims);
  let outMap: ChannelMap, channels: number, axis: Side['axis'];
  if (n.opType === 'Conv') {
    if (dims.length < 3) return refuse('dtype-unsupported', `'${labelOf(scope, n)}' has a weight of rank ${dims.length}`);
    outMap = layouts.convOutput(v); channels = dims[0]!; axis = 'channel-1';
  } else if (n.opType === 'Gemm') {
    if (dims.length !== 2) return refuse('dtype-unsupported', `'${labelOf(scope, n)}' has a weight of rank ${dims.length}`);
    const t = attrInt(n, 'transB', 0) === 1;
    outMap = t ? layouts.rows(v) : layouts.columns(v); channels = t ? dims[0]! : dims[1]!; axis = 'last';
  } else {
    if (dims.length !== 2) return refuse('dtype-unsupported', `'${labelOf(scope, n)}' has a weight of rank ${dims.length}`);
    outMap = layouts.columns(v); channels = dims[1]!; axis = 'last';
  }
  const side: Side = { node: n, label: labelOf(scope, n), weight: w.tensor, values: w.values, dims, map: outMap, outMap, outChannels: channels, axis };
  const biasAt = n.opType === 'Gemm' ? 2 : n.opType === 'Conv' ? 2 : -1;
  if (biasAt > 0 && n.inputs[biasAt]) {
    const b = constantWeight(scope, n, biasAt, 'bias');
    if (isRefused(b)) return b;
    // Conv's bias is [Cout]; Gemm's C broadcasts, and only a per-column C can follow a per-column scale
    const perChannel = b.values.length === channels && b.tensor.dims.filter((d) => d !== 1).length <= 1
      && (b.tensor.dims.length === 0 || b.tensor.dims[b.tensor.dims.length - 1] === channels);
    if (!perChannel) return refuse('bias-not-per-channel', `the bias of '${side.label}' has shape [${b.tensor.dims.join(', ')}], not one value per output channel`);
    side.bias = b;
  }
  return side;
}

/** The second layer of a pair: its input channels are multiplied. */
function secondSide(scope: Scope, n: Node): Side | Refused {
  const w = constantWeight(scope, n, 1, 'weight');
  if (isRefused(w)) return w;
  const dims = [...w.tensor.dims];
  const v = weightView(dims);
  let map: ChannelMap, outMap: ChannelMap, outChannels: number, axis: Side['axis'];
  if (n.opType === 'Conv') {
    if (dims.length < 3) return refuse('dtype-unsupported', `'${labelOf(scope, n)}' has a weight of rank ${dims.length}`);
    const group = attrInt(n, 'group', 1);
    if (group < 1 || dims[0]! % group !== 0) return refuse('dtype-unsupported', `'${labelOf(scope, n)}' has group ${group}`);
    map = layouts.convInput(v, group); outMap = layouts.convOutput(v); outChannels = dims[0]!; axis = 'channel-1';
  } else if (n.opType === 'Gemm') {
    if (dims.length !== 2 || attrInt(n, 'transA', 0) !== 0) return refuse('axis-mismatch', `'${labelOf(scope, n)}' transposes its input (transA), so its input channels are not the last axis`);
    const t = attrInt(n, 'transB', 0) === 1;
    map = t ? layouts.columns(v) : layouts.rows(v); outMap = t ? layouts.rows(v) : layouts.columns(v);
    outChannels = t ? dims[0]! : dims[1]!; axis = 'last';
  } else {
    if (dims.length !== 2) return refuse('dtype-unsupported', `'${labelOf(scope, n)}' has a weight of rank ${dims.length}`);
    map = layouts.rows(v); outMap = layouts.columns(v); outChannels = dims[1]!; axis = 'last';
  }
  return { node: n, label: labelOf(scope, n), weight: w.tensor, values: w.values, dims, map, outMap, outChannels, axis };
}

/** Whether a step between the layers keeps f(s x) = s f(x) for every s > 0, or why not. */
function homogeneous(scope: Scope, n: Node): true | Refused {
  const label = labelOf(scope, n);
  if (n.opType !== 'PRelu') return true;
  const slope = n.inputs[1] ? constantOf(scope, n.inputs[1]) : undefined;
  if (!slope) return refuse('activation-not-homogeneous', `the slope of '${label}' is computed at run time`);
  if (tensorToFloat64(slope.tensor).some((a) => !(a >= 0))) return refuse('activation-not-homogeneous', `'${label}' has a negative slope`);
  return true;
}

interface PairMatch { scope: Scope; first: Node; second: Node; through: Node[] }

/** Walk from a layer's output through single-reader steps to the next layer, if the path is a pair. */
function findPair(scope: Scope, first: Node): { match: PairMatch } | { refused: Refused; second: Node; through: Node[] } | undefined {
  const through: Node[] = [];
  let v = first.outputs[0];
  for (let hops = 0; v && hops < 8; hops++) {
    const readers = scope.ud.consumers(v);
    if (readers.length !== 1 || scope.ud.isGraphOutput(v)) return undefined;
    const r = readers[0]!;
    if (LAYERS.has(r.opType) && r.inputs[0] === v && (r.domain === '' || r.domain === 'ai.onnx')) return { match: { scope, first, second: r, through } };
    if (HOMOGENEOUS.has(r.opType)) { through.push(r); v = r.outputs[0]; continue; }
    if (!OTHER_ACTIVATIONS.has(r.opType)) return undefined;
    // a non-homogeneous activation: report the pair as refused only when a layer follows it directly
    const next = r.outputs[0] ? scope.ud.consumers(r.outputs[0]) : [];
    if (next.length === 1 && LAYERS.has(next[0]!.opType) && next[0]!.inputs[0] === r.outputs[0]) {
      const what = r.opType === 'Clip' ? `'${labelOf(scope, r)}' (Clip) has finite bounds, so clip(s x) != s clip(x)` : `'${labelOf(scope, r)}' (${r.opType}) is not positively homogeneous: f(s x) != s f(x)`;
      return { refused: refuse('activation-not-homogeneous', what), second: next[0]!, through: [...through, r] };
    }
    return undefined;
  }
  return undefined;
}

interface LivePair {
  scope: Scope;
  a: Side;
  b: Side;
  through: Node[];
  entry: EqualizedPair;
}

const MAX_SWEEPS = 50;
const SETTLED = 1e-6;
/** The least rise of the chain's weakest channel SQNR that makes equalizing it worth a change of the weights. */
const MIN_GAIN_DB = 0.1;

/** One pass over a chain's pairs; returns the largest |log s| applied. */
function sweep(pairs: LivePair[]): number {
  let moved = 0;
  for (const p of pairs) {
    const n = p.entry.channels;
    const r1 = channelMaxAbs(p.a.values, p.a.outMap, n);
    const r2 = channelMaxAbs(p.b.values, p.b.map, n);
    const s = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      // a dead channel on either side has nothing to balance
      s[i] = r1[i]! > 0 && r2[i]! > 0 ? Math.sqrt(r1[i]! * r2[i]!) / r2[i]! : 1;
      moved = Math.max(moved, Math.abs(Math.log(s[i]!)));
    }
    scaleBy(p.a.values, p.a.outMap, s, true);
    if (p.a.bias) for (let i = 0; i < n; i++) p.a.bias.values[i] = p.a.bias.values[i]! / s[i]!;
    scaleBy(p.b.values, p.b.map, s, false);
  }
  return moved;
}

function scaleBy(values: Float64Array, map: ChannelMap, s: Float64Array, divide: boolean): void {
  for (let e = 0, i = 0; e < map.of.length; e++) {
    const f = s[map.of[e]!]!;
    for (const end = i + map.unit; i < end; i++) values[i] = divide ? values[i]! / f : values[i]! * f;
  }
}

/** Chains of pairs that share layers (the second layer of one pair is the first of the next), in order. */
function chainsOf(pairs: LivePair[]): LivePair[][] {
  const byFirst = new Map(pairs.map((p) => [p.a.node, p]));
  const isSecond = new Set(pairs.map((p) => p.b.node));
  const chains: LivePair[][] = [];
  for (const p of pairs) {
    if (isSecond.has(p.a.node)) continue; // not the head of its chain
    const chain = [p];
    for (let next = byFirst.get(p.b.node); next && !chain.includes(next); next = byFirst.get(next.b.node)) chain.push(next);
    chains.push(chain);
  }
  return chains;
}

export interface EqualizeOptions {
  /** The numeric proof of a chain's region (src/verify/prove.ts), as for folds. */
  prove?: (c: ProofCase) => boolean;
}

/** What equalization did: one entry per pair found (equalized or refused), and the layers whose weights it changed. */
export interface Equalization {
  pairs: EqualizedPair[];
  /** Each layer of an equalized chain, once: the whole-model check watches them as it watches folded layers. */
  rewritten: RewrittenNode[];
}

/** Equalize every eligible pair of the model in place. */
export function equalizeModel(model: Model, opts: EqualizeOptions = {}): Equalization {
  const entries: EqualizedPair[] = [];
  const live: LivePair[] = [];
  const opsetOf = (domain: string) => opsetVersion(model, domain) ?? 1;
  for (const scope of buildScopes(model)) {
    for (const n of scope.graph.nodes) {
      if (!LAYERS.has(n.opType) || !(n.domain === '' || n.domain === 'ai.onnx')) continue;
      const found = findPair(scope, n);
      if (!found) continue;
      const base = { first: labelOf(scope, n), graph: scope.path, channels: 0, sqnr: null };
      if ('refused' in found) {
        entries.push({ ...base, second: labelOf(scope, found.second), through: found.through.map((t) => labelOf(scope, t)), status: 'refused', reason: found.refused.refusal, hint: found.refused.hint });
        continue;
      }
      const m = found.match;
      const entry: EqualizedPair = { ...base, second: labelOf(scope, m.second), through: m.through.map((t) => labelOf(scope, t)), status: 'refused', reason: null, hint: '' };
      entries.push(entry);
      const stepRefusal = m.through.map((t) => homogeneous(scope, t)).find(isRefused);
      if (stepRefusal) { entry.reason = stepRefusal.refusal; entry.hint = stepRefusal.hint; continue; }
      const a = firstSide(scope, n);
      if (isRefused(a)) { entry.reason = a.refusal; entry.hint = a.hint; continue; }
      const b = secondSide(scope, m.second);
      if (isRefused(b)) { entry.reason = b.refusal; entry.hint = b.hint; continue; }
      if (a.axis !== b.axis) {
        entry.reason = 'axis-mismatch';
        entry.hint = `'${a.label}' writes channels on ${a.axis === 'last' ? 'the last axis' : 'axis 1'} but '${b.label}' reads them on ${b.axis === 'last' ? 'the last axis' : 'axis 1'}`;
        continue;
      }
      const n2 = channelCount(b);
      if (n2 !== a.outChannels) {
        entry.reason = 'axis-mismatch';
        entry.hint = `'${a.label}' has ${a.outChannels} output channels but '${b.label}' reads ${n2}`;
        continue;
      }
      entry.channels = a.outChannels;
      live.push({ scope, a, b, through: m.through, entry });
    }
  }
  const changed = new Set<Node>();
  for (const chain of chainsOf(live)) if (equalizeChain(chain, opsetOf, opts)) for (const p of chain) changed.add(p.a.node).add(p.b.node);
  // (each layer once, in the order the pairs were found)
  const rewritten: RewrittenNode[] = [];
  for (const p of live) {
    for (const n of [p.a.node, p.b.node]) {
      if (!changed.delete(n)) continue;
      rewritten.push({ node: n, label: labelOf(p.scope, n), graph: p.scope.path });
    }
  }
  return { pairs: entries, rewritten };
}

/** Input channels the second layer reads (the largest channel index in its input map, plus one). */
function channelCount(s: Side): number {
  let m = -1;
  for (const c of s.map.of) if (c > m) m = c;
  return m + 1;
}

/** Equalize one chain, prove it, and say whether its weights changed (false: refused and put back as they were). */
function equalizeChain(chain: LivePair[], opsetOf: (d: string) => number, opts: EqualizeOptions): boolean {
  // A layer in the middle of a chain is the second side of one pair and the first of the next: two Side objects
  // (one map each) over one values array, so each sweep sees the other's scaling.
  const byNode = new Map<Node, Side>();
  for (const p of chain) {
    for (const s of [p.a, p.b]) {
      const seen = byNode.get(s.node);
      if (seen) { s.values = seen.values; if (s.bias) seen.bias = s.bias; } else byNode.set(s.node, s);
    }
  }
  const layers = [...byNode.values()];
  const figuresOf = (m: Map<Side, SqnrFigures>, s: Side) => m.get(byNode.get(s.node)!)!;
  const before = new Map<Side, SqnrFigures>(layers.map((s) => [s, sqnrOf(s.values, s.outMap, s.outChannels)]));
  const scope = chain[0]!.scope;
  const regionNodes = orderedRegion(scope.graph, chain);
  const last = chain[chain.length - 1]!.b.node;
  const regionOutputs = [last.outputs[0]!];
  const regionBefore = regionGraph(scope, regionNodes, regionOutputs);
  const saved = new Map<Tensor, Tensor['storage']>();
  for (const s of layers) { saved.set(s.weight, s.weight.storage); if (s.bias) saved.set(s.bias.tensor, s.bias.tensor.storage); }

  for (let k = 0; k < MAX_SWEEPS; k++) if (sweep(chain) < SETTLED) break;

  for (const s of layers) {
    setTensorValues(s.weight, s.values);
    if (s.bias) setTensorValues(s.bias.tensor, s.bias.values);
  }
  // proven on the stored (rounded) weights, like a fold
  const afterFigures = new Map<Side, SqnrFigures>(layers.map((s) => [s, sqnrOf(tensorToFloat64(s.weight), s.outMap, s.outChannels)]));
  // Balancing can move the weakest channel from one layer to the other; keep it only when the chain's weakest
  // channel (under one per-tensor scale) comes out stronger than it went in.
  const weakest = (m: Map<Side, SqnrFigures>) => Math.min(...[...m.values()].map((f) => f.worstChannel));
  const was = weakest(before), now = weakest(afterFigures);
  if (!(now > was + MIN_GAIN_DB)) {
    restore(saved);
    for (const p of chain) {
      p.entry.reason = 'no-gain';
      p.entry.hint = `equalizing this chain would not raise its weakest channel's 8-bit SQNR (${dbText(was)} dB -> ${dbText(now)} dB), so it was left as it was`;
    }
    return false;
  }
  const regionAfter = regionGraph(scope, regionNodes, regionOutputs);
  const proven = !opts.prove || opts.prove({
    before: regionBefore, after: regionAfter, opsetOf, nodes: chain.map((p) => p.entry.first), target: chain[chain.length - 1]!.entry.second,
    direction: 'into-consumer', graph: scope.path,
  });
  if (!proven) {
    restore(saved);
    for (const p of chain) {
      p.entry.status = 'refused'; p.entry.reason = 'proof-failed';
      p.entry.hint = 'the numeric proof of the equalized chain did not pass, so its weights were left as they were';
    }
    return false;
  }
  for (const p of chain) {
    p.entry.status = 'equalized';
    p.entry.reason = null;
    p.entry.hint = `output channels of '${p.a.label}' divided and input channels of '${p.b.label}' multiplied by the same ${p.entry.channels} scales`;
    p.entry.sqnr = { firstBefore: figuresOf(before, p.a), firstAfter: figuresOf(afterFigures, p.a), secondBefore: figuresOf(before, p.b), secondAfter: figuresOf(afterFigures, p.b) };
  }
  return true;
}

/** Put the weights and biases of a chain back as they were read. */
function restore(saved: Map<Tensor, Tensor['storage']>): void {
  for (const [t, storage] of saved) { t.storage = storage; t.origin = undefined; }
}

const dbText = (x: number) => (Number.isFinite(x) ? x.toFixed(1) : x > 0 ? 'exact' : '-inf');

/** The chain's nodes (layers and the steps between them) in graph order. */
function orderedRegion(g: Graph, chain: LivePair[]): Node[] {
  const set = new Set<Node>(chain.flatMap((p) => [p.a.node, ...p.through, p.b.node]));
  return g.nodes.filter((n) => set.has(n));
}
