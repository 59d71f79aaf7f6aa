// Quantization readiness of folded layers (report only). Folding a normalization scales each output channel
// of a layer's weights by its own factor gamma/sqrt(var + eps); channels whose running variance was tiny get
// huge factors, so after the fold the per-channel weight ranges can differ by orders of magnitude (Nagel et al.
// 2019, "Data-Free Quantization Through Weight Equalization and Bias Correction", arXiv:1906.04721, section 3).
// A per-tensor 8-bit scale is set by the widest channel, so narrow channels keep only a few levels.
//
// spread = largest per-output-channel range / median per-output-channel range, where a channel's range is
// max - min of its weights. Beside it, what the spread costs: the SQNR of the layer's weights under symmetric
// 8-bit quantization per tensor and per output channel, and the worst single channel under the per-tensor
// scale (src/fold/int8.ts), before and after the fold. A layer is flagged on that worst channel.
import type { Model, Node } from '../graph/ir.js';
import { attrInt, DataType, elementCount } from '../graph/ir.js';
import type { LedgerEntry } from './types.js';
import { buildScopes, constantOf, labelOf, type Scope } from './scope.js';
import { layouts, weightView, type ChannelMap } from './weights.js';
import { tensorToFloat64 } from '../graph/tensor.js';
import { noiseOfRun, quantizeDequantize, roundedInt8, sqnrFromSums, sqnrOf, symmetricScale, type Int8Granularity, type SqnrFigures } from './int8.js';
import { minmaxRun, noiseRun, stageFloat32 } from './int8-simd.js';
import { peekBytes } from '../graph/lazy-bytes.js';
import { makeTensor } from '../graph/tensor.js';
import { withSwappedTensors } from '../graph/replace-tensors.js';
import type { Tensor } from '../graph/ir.js';

/** Quantization readiness of one folded layer (Nagel et al. 2019, arXiv:1906.04721). */
export interface QuantRow {
  /** The layer the normalization(s) folded into, as the ledger names it. */
  target: string;
  /**
   * With --clone-shared, the copy of `target` the fold made and rewrote: the after figures are the copy's weights
   * (the before figures are `target`'s, which the copy started from; `target` itself ships unchanged). Absent when
   * `target` itself was rewritten.
   */
  copy?: string;
  /**
   * Normalization(s) folded into it (with a copy: into the copy; a fold into `target` made before the copy was
   * taken is in the copy's weights too, but listed on `target`'s own row).
   */
  norms: string[];
  channels: number;
  /** Largest per-output-channel weight range divided by the median one, before and after folding. */
  spreadBefore: number;
  spreadAfter: number;
  /** SQNR (dB) of the weights under symmetric 8-bit quantization, before and after the fold. */
  sqnrBefore: SqnrFigures;
  sqnrAfter: SqnrFigures;
  /** True when the fold brought some output channel's SQNR under a per-tensor scale below the threshold. */
  flagged: boolean;
}

/**
 * Default --quant-threshold: flag a folded layer when, under one per-tensor 8-bit scale, its worst output channel
 * keeps less than 20 dB SQNR, i.e. the rounding noise is more than a tenth of that channel's weights (rms).
 * Our own choice: a layer of well-spread weights keeps about 35-45 dB in every channel at 8 bits, so 20 dB means
 * a channel has lost more than two to four bits to the widest channel's scale; near the spread limit below.
 */
export const QUANT_THRESHOLD_DB = 20;

/** max - min of each output channel's weights (`channelOf` says which channel each element belongs to). */
export function channelRanges(values: Float64Array, channelOf: ChannelMap, channels: number): Float64Array {
  const lo = new Float64Array(channels).fill(Infinity);
  const hi = new Float64Array(channels).fill(-Infinity);
  for (let e = 0, i = 0; e < channelOf.of.length; e++) {
    const c = channelOf.of[e]!;
    for (const end = i + channelOf.unit; i < end; i++) {
      const x = values[i]!;
      if (x < lo[c]!) lo[c] = x;
      if (x > hi[c]!) hi[c] = x;
    }
  }
  const out = new Float64Array(channels);
  for (let c = 0; c < channels; c++) out[c] = hi[c]! >= lo[c]! ? hi[c]! - lo[c]! : 0;
  return out;
}

/** Largest range / median range (median of an even count: mean of the two middle values). */
export function spreadOf(ranges: Float64Array): number {
  if (ranges.length === 0) return 1;
  const sorted = Float64Array.from(ranges).sort();
  const n = sorted.length;
  const median = n % 2 ? sorted[(n - 1) / 2]! : (sorted[n / 2 - 1]! + sorted[n / 2]!) / 2;
  const max = sorted[n - 1]!;
  if (median === 0) return max === 0 ? 1 : Infinity;
  return max / median;
}

export interface LayerWeights { values: Float64Array; dims: number[]; map: ChannelMap; channels: number; tensor: Tensor }
/** A layer's weight tensor and its output-channel map, not yet decoded. */
export type LayerShape = Omit<LayerWeights, 'values'>;

/** The weight of a Conv/ConvTranspose/Gemm/MatMul node with its output-channel map, or undefined. */
export function layerWeights(scope: Scope, n: Node): LayerWeights | undefined {
  const l = layerShape(scope, n);
  return l ? { ...l, values: tensorToFloat64(l.tensor) } : undefined;
}

/** layerWeights without decoding the values. */
export function layerShape(scope: Scope, n: Node): LayerShape | undefined {
  const w = n.inputs[1] ? constantOf(scope, n.inputs[1]) : undefined;
  if (!w) return undefined;
  const dims = [...w.tensor.dims];
  const v = weightView(dims);
  if (!FLOAT_TYPES.has(w.tensor.dataType)) return undefined;
  const tensor = w.tensor;
  switch (n.opType) {
    case 'Conv': // W [Cout, Cin/group, k...]: output channel axis 0
      if (dims.length < 3) return undefined;
      return { dims, map: layouts.convOutput(v), channels: dims[0]!, tensor };
    case 'ConvTranspose': { // W [Cin, Cout/group, k...]: output channel axis 1, times group
      const group = attrInt(n, 'group', 1);
      if (dims.length < 3 || group < 1 || dims[0]! % group !== 0) return undefined;
      return { dims, map: layouts.convTransposeOutput(v, group), channels: dims[1]! * group, tensor };
    }
    case 'Gemm': // B is [K, N], or [N, K] with transB=1
      if (dims.length !== 2) return undefined;
      return attrInt(n, 'transB', 0) === 1
        ? { dims, map: layouts.rows(v), channels: dims[0]!, tensor }
        : { dims, map: layouts.columns(v), channels: dims[1]!, tensor };
    case 'MatMul': // constant [K, N]: output channel is the last dim
      if (dims.length !== 2) return undefined;
      return { dims, map: layouts.columns(v), channels: dims[1]!, tensor };
  }
  return undefined;
}

export interface LayerFigures { spread: number; channels: number; sqnr: SqnrFigures }

function figuresOfLayer(scope: Scope, n: Node): LayerFigures | undefined {
  const l = layerShape(scope, n);
  return l ? layerFigures(l) : undefined;
}

/**
 * Spread and SQNR figures of a layer's weights: in SIMD where it applies, else in scalar passes that give the
 * definitions' figures exactly; `simd` false computes the definitions one figure at a time.
 */
export function layerFigures(l: LayerShape, simd = true): LayerFigures {
  if (!simd) {
    // the definitions, one figure at a time (what the faster paths below are tested against)
    const values = tensorToFloat64(l.tensor);
    return { spread: spreadOf(channelRanges(values, l.map, l.channels)), channels: l.channels, sqnr: sqnrOf(values, l.map, l.channels) };
  }
  return simdFigures(l) ?? scalarFigures(tensorToFloat64(l.tensor), l.map, l.channels);
}

/**
 * channelRanges, spreadOf and sqnrOf in fewer passes: each channel's max |w| is max(|min|, |max|), so the pass
 * that finds the ranges finds the scales too (many small layers: the passes and arrays were most of the cost).
 */
function scalarFigures(values: Float64Array, map: ChannelMap, channels: number): LayerFigures {
  const lo = new Float64Array(channels).fill(Infinity), hi = new Float64Array(channels).fill(-Infinity);
  const of = map.of, unit = map.unit;
  for (let e = 0, i = 0; e < of.length; e++) {
    const c = of[e]!;
    let l = lo[c]!, h = hi[c]!;
    for (const end = i + unit; i < end; i++) {
      const x = values[i]!;
      if (x < l) l = x;
      if (x > h) h = x;
    }
    lo[c] = l; hi[c] = h;
  }
  // lo becomes the ranges and hi the scales (no number in a channel: range 0, max |w| 0, as the definitions give)
  let widest = 0;
  for (let c = 0; c < channels; c++) {
    const a = lo[c]!, b = hi[c]!;
    const m = b >= a ? Math.max(Math.abs(a), Math.abs(b)) : 0;
    lo[c] = b >= a ? b - a : 0;
    hi[c] = symmetricScale(m);
    if (m > widest) widest = m;
  }
  const scaleT = symmetricScale(widest);
  const sig = new Float64Array(channels), noiseT = new Float64Array(channels), acc = new Float64Array(3);
  for (let e = 0, i = 0; e < of.length; e++, i += unit) {
    const c = of[e]!;
    acc[0] = sig[c]!; acc[1] = noiseT[c]!;
    noiseOfRun(values, i, i + unit, scaleT, hi[c]!, acc);
    sig[c] = acc[0]; noiseT[c] = acc[1];
  }
  return { spread: spreadOf(lo), channels, sqnr: sqnrFromSums(sig, noiseT, acc[2]!) };
}

/** Weight types whose every value is a float32, so the float32 SIMD figures see exactly the stored values. */
const FLOAT32_EXACT = new Set<number>([DataType.FLOAT, DataType.FLOAT16, DataType.BFLOAT16]);

/**
 * figuresOfLayer in WebAssembly SIMD (src/fold/int8-simd.ts) for float32-exact weights whose channels lie in
 * runs of at least 16 weights (Conv, ConvTranspose, Gemm with transB); undefined otherwise. Float32 raw bytes are
 * copied into the kernels' memory as they are, never decoded to float64.
 */
function simdFigures(l: LayerShape): LayerFigures | undefined {
  const t = l.tensor, n = elementCount(l.dims), { map, channels } = l;
  if (!FLOAT32_EXACT.has(t.dataType) || map.unit < 16 || map.of.length * map.unit !== n) return undefined;
  const s = t.storage;
  const raw = t.dataType === DataType.FLOAT && (s.kind === 'raw' || s.kind === 'external') && s.bytes.byteLength >= n * 4 ? s.bytes : undefined;
  const staged = stageFloat32(n, (view) => {
    if (raw) {
      // read straight into the kernels' memory when the bytes are on disk (no fresh buffer per weight)
      const dest = new Uint8Array(view.buffer, view.byteOffset, n * 4);
      const got = peekBytes(raw.subarray(0, n * 4), dest);
      if (got !== dest) dest.set(got);
    }
    else view.set(tensorToFloat64(t));
  });
  if (!staged) return undefined;
  const lo = new Float64Array(channels).fill(Infinity), hi = new Float64Array(channels).fill(-Infinity);
  const run = new Float64Array(2);
  for (let e = 0; e < map.of.length; e++) {
    const c = map.of[e]!;
    minmaxRun(staged, e * map.unit, map.unit, run);
    if (run[0]! < lo[c]!) lo[c] = run[0]!;
    if (run[1]! > hi[c]!) hi[c] = run[1]!;
  }
  const ranges = new Float64Array(channels), maxAbs = new Float64Array(channels);
  let widest = 0;
  for (let c = 0; c < channels; c++) {
    if (!(hi[c]! >= lo[c]!)) continue; // no number in the channel: range 0, max |w| 0, as the scalar loops give
    ranges[c] = hi[c]! - lo[c]!;
    maxAbs[c] = Math.max(Math.abs(lo[c]!), Math.abs(hi[c]!));
    if (maxAbs[c]! > widest) widest = maxAbs[c]!;
  }
  const scaleT = symmetricScale(widest), scaleC = maxAbs.map(symmetricScale);
  const sig = new Float64Array(channels), noiseT = new Float64Array(channels), acc = new Float64Array(3);
  for (let e = 0; e < map.of.length; e++) {
    const c = map.of[e]!, sc = scaleC[c]!, i = e * map.unit;
    acc[0] = sig[c]!; acc[1] = noiseT[c]!;
    // a zero scale (a channel of zeros, or of weights too small for float32 to scale) takes the scalar rounding
    if (scaleT > 0 && sc > 0) noiseRun(staged, i, map.unit, scaleT, sc, acc, (x) => [quantizeDequantize(x, scaleT), quantizeDequantize(x, sc)]);
    else noiseOfRun(staged, i, i + map.unit, scaleT, sc, acc);
    sig[c] = acc[0]; noiseT[c] = acc[1];
  }
  return { spread: spreadOf(ranges), channels, sqnr: sqnrFromSums(sig, noiseT, acc[2]!) };
}

const LINEAR = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);
const FLOAT_TYPES = new Set<number>([DataType.FLOAT, DataType.DOUBLE, DataType.FLOAT16, DataType.BFLOAT16]);

/**
 * The model as an 8-bit weight deployment would run it: the constant weights of every Conv, ConvTranspose, Gemm
 * and MatMul (subgraphs included) rounded through symmetric 8-bit quantize-dequantize, per tensor or per output
 * channel; everything else as it is. `model` is not changed. Returns the view and the number of layers rounded.
 */
export function roundedWeightsModel(model: Model, granularity: Int8Granularity): { model: Model; layers: number } {
  const rounded = new Map<Tensor, Tensor>();
  for (const scope of buildScopes(model)) {
    for (const n of scope.graph.nodes) {
      if (!LINEAR.has(n.opType)) continue;
      const lw = layerWeights(scope, n);
      if (!lw || rounded.has(lw.tensor)) continue; // a weight shared by two layers is rounded once, by the first
      const q = roundedInt8(lw.values, lw.map, lw.channels, granularity);
      rounded.set(lw.tensor, { ...makeTensor(lw.tensor.name, lw.dims, lw.tensor.dataType, q), docString: lw.tensor.docString });
    }
  }
  return { model: withSwappedTensors(model, (t) => rounded.get(t)), layers: rounded.size };
}

/** Index of a scope's linear nodes, built once per scope (a lookup per folded layer would make the report quadratic). */
interface NodeIndex {
  /** Linear nodes by name; unnamed ones by their output and by their data input (the first one wins). */
  linearByName: Map<string, Node>;
  unnamedByOutput: Map<string, Node>;
  unnamedByInput: Map<string, Node>;
}

function indexOf(scope: Scope, cache: Map<Scope, NodeIndex>): NodeIndex {
  let ix = cache.get(scope);
  if (ix) return ix;
  ix = { linearByName: new Map(), unnamedByOutput: new Map(), unnamedByInput: new Map() };
  for (const n of scope.graph.nodes) {
    if (!LINEAR.has(n.opType)) continue;
    if (n.name) { if (!ix.linearByName.has(n.name)) ix.linearByName.set(n.name, n); continue; }
    if (n.outputs[0] !== undefined && !ix.unnamedByOutput.has(n.outputs[0])) ix.unnamedByOutput.set(n.outputs[0], n);
    if (n.inputs[0] !== undefined && !ix.unnamedByInput.has(n.inputs[0])) ix.unnamedByInput.set(n.inputs[0], n);
  }
  cache.set(scope, ix);
  return ix;
}

/**
 * The nodes of a scope with the given ledger labels (name, or op#index when unnamed; the first one wins): one
 * pass over the graph, keeping only the labels asked for (no map of every label).
 */
function nodesByLabel(scope: Scope, labels: ReadonlyMap<string, unknown>): Map<string, Node> {
  const found = new Map<string, Node>();
  for (const n of scope.graph.nodes) {
    const label = labelOf(scope, n);
    if (labels.has(label) && !found.has(label)) found.set(label, n);
  }
  return found;
}

/**
 * The folded model's node for a target of the original. Named nodes keep their names through a fold; an
 * unnamed one's op#index label shifts when nodes before it are removed, so it is found by the values it
 * shares with the original: its output (kept by a fold into the consumer) or its data input (kept by a fold
 * into the producer).
 */
function counterpart(after: NodeIndex, original: Node): Node | undefined {
  if (original.name) return after.linearByName.get(original.name);
  return after.unnamedByOutput.get(original.outputs[0]!) ?? after.unnamedByInput.get(original.inputs[0]!);
}

function scopeFor(scopes: Scope[], others: Scope[], path: string): Scope | undefined {
  const i = others.findIndex((s) => s.path === path);
  // fold never adds or removes subgraphs, so the pre-order position identifies a body even if a path's label moved
  return scopes.find((s) => s.path === path) ?? (i >= 0 ? scopes[i] : undefined);
}

/** What the quantization report reads of a ledger entry. */
export type FoldedTargets = Pick<LedgerEntry, 'node' | 'status' | 'target' | 'targets' | 'graph' | 'copy'>;

/** A folded target with the figures of its original weights: the first half of a quantization row. */
export interface TargetBefore {
  graph: string;
  target: string;
  /** The --clone-shared copy of the target that the fold rewrote (found by this name in the folded model). */
  copy?: string;
  norms: string[];
  /** The target node in the original model (the folded model's node is found from it, unless a copy was rewritten). */
  node: Node;
  figures: LayerFigures;
}

/** The original model's half of the quantization report: its scopes and each folded target's figures. */
export interface QuantBefore { scopes: Scope[]; targets: TargetBefore[] }

/**
 * The figures of the original weights of every folded target layer, in ledger order (quantReadiness's first
 * half; it needs nothing of the folded model, so a file job works it out while the folded model is written).
 */
export function quantBefore(before: Model, ledger: readonly FoldedTargets[]): QuantBefore {
  // With --clone-shared a fold rewrote a copy of its target and left the target as it was: the row is the copy's
  // (its folded weights ship), its before figures the target's (what the copy started from). A later fold into
  // the copy (the ledger then names the copy as its target) joins the copy's row. So first the copies' originals,
  // by graph, then the rows keyed by the layer actually rewritten.
  let originOf: Map<string, Map<string, string>> | undefined;
  for (const e of ledger) {
    if (e.status !== 'folded' || e.target === null || e.copy === undefined) continue;
    let inGraph = (originOf ??= new Map()).get(e.graph);
    if (!inGraph) originOf.set(e.graph, inGraph = new Map());
    inGraph.set(e.copy, e.target);
  }
  // by graph, then rewritten layer (no joined key per entry); `order` keeps the ledger's order across graphs
  type Group = { graph: string; target: string; copy?: string; norms: string[] };
  const byGraph = new Map<string, Map<string, Group>>();
  const order: Group[] = [];
  for (const e of ledger) {
    if (e.status !== 'folded' || e.target === null) continue;
    let inGraph = byGraph.get(e.graph);
    if (!inGraph) byGraph.set(e.graph, inGraph = new Map());
    const origins = originOf?.get(e.graph);
    // a norm read by several layers folded into each of them: one row per layer
    const add = (target: string) => {
      // (a fold that made a copy has a single target, the copy's original)
      const rewritten = e.copy ?? target, original = e.copy !== undefined ? target : origins?.get(target) ?? target;
      let g = inGraph!.get(rewritten);
      if (!g) {
        inGraph!.set(rewritten, g = rewritten === original ? { graph: e.graph, target: original, norms: [] } : { graph: e.graph, target: original, copy: rewritten, norms: [] });
        order.push(g);
      }
      if (!g.norms.includes(e.node)) g.norms.push(e.node);
    };
    if (e.copy !== undefined) add(e.target);
    else if (e.targets?.length) for (const t of e.targets) add(t);
    else add(e.target);
  }
  if (order.length === 0) return { scopes: [], targets: [] };
  // the original layers' labels wanted in each graph
  const wantedIn = new Map<string, Map<string, true>>();
  for (const g of order) {
    let w = wantedIn.get(g.graph);
    if (!w) wantedIn.set(g.graph, w = new Map());
    w.set(g.target, true);
  }
  const sb = buildScopes(before);
  const found = new Map<string, { scope: Scope; nodes: Map<string, Node> }>();
  for (const [graph, wanted] of wantedIn) {
    const scope = scopeFor(sb, sb, graph);
    if (scope) found.set(graph, { scope, nodes: nodesByLabel(scope, wanted) });
  }
  const targets: TargetBefore[] = [];
  for (const g of order) {
    const at = found.get(g.graph), node = at?.nodes.get(g.target);
    if (!node) continue;
    const figures = figuresOfLayer(at!.scope, node);
    if (!figures) continue;
    targets.push(g.copy === undefined ? { graph: g.graph, target: g.target, norms: g.norms, node, figures } : { graph: g.graph, target: g.target, copy: g.copy, norms: g.norms, node, figures });
  }
  return { scopes: sb, targets };
}

/**
 * quantReadiness's second half: the figures of each target's folded weights in `after`, and the rows.
 * `afterScopes` may give scopes of `after` already built (and current).
 */
export function quantAfter(start: QuantBefore, after: Model, thresholdDb = QUANT_THRESHOLD_DB, afterScopes?: Scope[]): QuantRow[] {
  if (start.targets.length === 0) return [];
  // (`afterScopes`: the fold's own scopes of `after`, still current, so its graphs are not indexed again)
  const sb = start.scopes, sa = afterScopes ?? buildScopes(after);
  const index = new Map<Scope, NodeIndex>();
  const scopes = new Map<string, Scope | undefined>(); // by graph path, looked up once per graph
  const rows: QuantRow[] = [];
  for (const t of start.targets) {
    let scopeA = scopes.get(t.graph);
    if (scopeA === undefined && !scopes.has(t.graph)) scopes.set(t.graph, scopeA = scopeFor(sa, sb, t.graph));
    if (!scopeA) continue;
    // (a copy is always named: freshName in the fold driver)
    const ix = indexOf(scopeA, index), na = t.copy !== undefined ? ix.linearByName.get(t.copy) : counterpart(ix, t.node);
    if (!na) continue;
    const b = t.figures, a = figuresOfLayer(scopeA, na);
    if (!a) continue;
    rows.push({
      target: t.target, ...(t.copy !== undefined ? { copy: t.copy } : {}), norms: t.norms, channels: a.channels, spreadBefore: b.spread, spreadAfter: a.spread,
      sqnrBefore: b.sqnr, sqnrAfter: a.sqnr,
      // flagged when the fold brought a channel below the threshold (a channel already that lossy before the fold,
      // e.g. a dead one, is shown but not blamed on the fold)
      flagged: a.sqnr.worstChannel < thresholdDb && a.sqnr.worstChannel < b.sqnr.worstChannel,
    });
  }
  return rows;
}

/**
 * One row per folded target layer, in ledger order. `before` is the original model, `after` the folded one;
 * `afterScopes` may give scopes of `after` already built (and current).
 */
export function quantReadiness(before: Model, after: Model, ledger: readonly LedgerEntry[], thresholdDb = QUANT_THRESHOLD_DB, afterScopes?: Scope[]): QuantRow[] {
  return quantAfter(quantBefore(before, ledger), after, thresholdDb, afterScopes);
}
