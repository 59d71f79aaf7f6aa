// The reference evaluator: runs a graph's nodes in list order (ONNX requires topological order), each through
// its registered kernel, freeing intermediate values once their last reader has run.
import { PleatError } from '../errors.js';
import { DataType, opsetVersion, subgraphsOf, elementCount, type Graph, type Model, type Node, type Tensor } from '../graph/ir.js';
import { peekBytes } from '../graph/lazy-bytes.js';
import { isFloatType, tensorToFloat64, dataTypeName } from '../graph/tensor.js';
import { getKernel } from './registry.js';
import { forgetPacked } from './gemm.js';
import { giveBack, isConstant, isPooled, markConstant, markTransient } from './pool.js';
import { charge, evaluating, liveBytes, release, resetLive } from './budget.js';
import type { KernelContext, NumArray, Precision, Value } from './value.js';

export interface RunOptions {
  precision: Precision;
  /** Called after each node has run, nodes of If branches and Loop/Scan bodies included (coverage of a check). */
  onNode?: (node: Node) => void;
}

export interface GraphRunOptions extends RunOptions {
  opsetOf: (domain: string) => number;
  outer?: OuterValues;
}

/** Turn an initializer/Constant tensor into a Value in the given precision. */
export function tensorToValue(t: Tensor, precision: Precision): Value {
  const f64 = tensorToFloat64(t);
  const data = precision === 'float32' && isFloatType(t.dataType) ? Float32Array.from(f64) : f64;
  return { type: t.dataType, dims: [...t.dims], data };
}

// Small decoded initializers are kept, so repeated runs of one model (probes, both precisions) decode each once.
// Keyed by the storage object, which every edit replaces (setTensorValues); dims and type are checked as well.
// Large ones are decoded when the node reading them runs and dropped after it (a model's weights may not fit
// in memory twice over, and most sit on disk until read: see src/onnx/sparse-read.ts).
interface Decoded { dims: string; type: number; f64?: Float64Array; f32?: Float32Array }
const decoded = new WeakMap<object, Decoded>();

/** Initializers with more elements than this are decoded per use and not kept. */
export const KEEP_DECODED_MAX = 1 << 16;

/** A float32 tensor's values straight from its raw bytes (a view when aligned: no conversion, no copy). */
function rawFloat32(t: Tensor): Float32Array | undefined {
  const s = t.storage;
  if (t.dataType !== DataType.FLOAT || (s.kind !== 'raw' && s.kind !== 'external')) return undefined;
  const n = elementCount(t.dims);
  if (s.bytes.byteLength < n * 4) return undefined; // the general decoder reports it
  const bytes = peekBytes(s.bytes.subarray(0, n * 4));
  if ((bytes.byteOffset & 3) === 0) return new Float32Array(bytes.buffer, bytes.byteOffset, n);
  return new Float32Array(new Uint8Array(bytes).buffer, 0, n); // a copy (a Buffer's slice would be a view)
}

function decodeFor(t: Tensor, precision: Precision, into?: Float64Array): NumArray {
  if (precision === 'float32') {
    const raw = rawFloat32(t);
    if (raw) return raw;
    return tensorToValue(t, precision).data;
  }
  return tensorToFloat64(t, into);
}

/** Kernels that read their operands element by element into float64 arithmetic, whatever the input array type. */
const WIDENING_KERNELS = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);

// Float64 buffers of large weights dropped after their step, reused for the next weight of the same size: a
// fresh array per weight (tens of MiB each on a large model) is faulted in page by page and lingers until the
// collector runs, which multiplied a proven fold's peak memory.
const spare = new Map<number, Float64Array[]>();
const SPARE_MAX_BYTES = 256 * 1024 * 1024;
let spareBytes = 0;

function takeSpare(n: number): Float64Array | undefined {
  const a = spare.get(n)?.pop();
  if (a) { spareBytes -= a.byteLength; forgetPacked(a); } // its packed tiles belong to the weight it held
  return a;
}

function putSpare(a: Float64Array): void {
  if (spareBytes + a.byteLength > SPARE_MAX_BYTES) return;
  spareBytes += a.byteLength;
  const list = spare.get(a.length) ?? [];
  list.push(a);
  spare.set(a.length, list);
}

/**
 * Decoded large weights shared by several runs stepping through one model together (the probes of a lockstep
 * check): the driver clears it after every run has taken the node, so each weight is decoded once per pass.
 */
export class WeightCache {
  private readonly held = new Map<Tensor, NumArray>();
  /** Decoded arrays some node's result holds (a kernel that passes its input through): never reused. */
  private readonly escaped = new Set<NumArray>();
  /** `shared`: the cache is the only one its runs use (no decoded tensor is kept across steps at all). */
  constructor(readonly shared = false) {}
  /** The node about to run (set by GraphRun.step). */
  reader: Node | undefined;
  get(t: Tensor, precision: Precision): NumArray {
    let d = this.held.get(t);
    if (!d) {
      const large = elementCount(t.dims) > KEEP_DECODED_MAX;
      // A matrix product's float32 weight goes in as stored even in a float64 run: its kernel widens each value
      // exactly as it copies the operand into its own memory, so no float64 copy of the weight is made at all.
      const asStored = large && precision === 'float64' && this.reader !== undefined && WIDENING_KERNELS.has(this.reader.opType) && (this.reader.domain === '' || this.reader.domain === 'ai.onnx')
        ? rawFloat32(t) : undefined;
      d = asStored ?? decodeFor(t, precision, large && precision === 'float64' ? takeSpare(elementCount(t.dims)) : undefined);
      // only large weights are marked (a weak set of every small tensor of a large graph costs the collector
      // more than the whole evaluation); a kernel never writes over a decoded tensor, which is not pooled
      if (large) markTransient(d);
      this.held.set(t, d);
    }
    return d;
  }
  /** A result of the node just run holds this array. */
  noteResult(data: NumArray): void {
    if (this.held.size > 0) for (const d of this.held.values()) if (d === data) this.escaped.add(d);
  }
  clear(): void {
    for (const d of this.held.values()) {
      if (d instanceof Float64Array && d.length > KEEP_DECODED_MAX && !this.escaped.has(d)) putSpare(d);
    }
    this.held.clear();
    this.escaped.clear();
  }
}

function initializerValue(t: Tensor, precision: Precision, weights: WeightCache): Value {
  if (weights.shared || elementCount(t.dims) > KEEP_DECODED_MAX) return { type: t.dataType, dims: [...t.dims], data: weights.get(t, precision) };
  const key = t.dims.join(',');
  let d = decoded.get(t.storage);
  if (!d || d.dims !== key || d.type !== t.dataType) { d = { dims: key, type: t.dataType }; decoded.set(t.storage, d); }
  const f32 = precision === 'float32' && isFloatType(t.dataType);
  let data: NumArray | undefined = f32 ? d.f32 : d.f64;
  if (!data) {
    data = decodeFor(t, precision);
    if (f32) d.f32 = data as Float32Array; else d.f64 = data as Float64Array;
    markConstant(data);
  }
  return { type: t.dataType, dims: [...t.dims], data };
}

/** Hold a caller's value in the run's precision (float tensors as Float32Array in float32 mode). */
function inPrecision(v: Value, precision: Precision): Value {
  if (!isFloatType(v.type)) return v.data instanceof Float64Array ? v : { ...v, data: Float64Array.from(v.data) };
  if (precision === 'float32') return v.data instanceof Float32Array ? v : { ...v, data: Float32Array.from(v.data) };
  return v.data instanceof Float64Array ? v : { ...v, data: Float64Array.from(v.data) };
}

/** Names a subgraph reads from its enclosing scopes (anything it uses but does not define itself). */
function outerReads(g: Graph, into: Set<string>): void {
  const defined = new Set<string>();
  for (const i of g.inputs) defined.add(i.name);
  for (const t of g.initializers) defined.add(t.name);
  for (const n of g.nodes) {
    for (const i of n.inputs) if (i && !defined.has(i)) into.add(i);
    for (const sg of subgraphsOf(n)) {
      const inner = new Set<string>();
      outerReads(sg, inner);
      for (const i of inner) if (!defined.has(i)) into.add(i);
    }
    for (const o of n.outputs) if (o) defined.add(o);
  }
  for (const o of g.outputs) if (!defined.has(o.name)) into.add(o.name);
}

/** Every value name a node reads, including what its subgraphs read from this scope. */
function readsOf(n: Node): string[] {
  const subs = subgraphsOf(n);
  if (subs.length === 0) return n.inputs.filter((x) => x !== '');
  const s = new Set(n.inputs.filter((x) => x !== ''));
  for (const g of subs) outerReads(g, s);
  return [...s];
}

/** Values visible from enclosing scopes (a Map is one). */
export interface OuterValues { get(name: string): Value | undefined }

/**
 * One run of a graph, a node at a time (`step`), so several runs can advance together: the probes of a check,
 * and the original and folded model in lockstep. Intermediate values are dropped once their last reader has
 * run; large weights are decoded when their node runs and dropped after it.
 */
export class GraphRun {
  private readonly env = new Map<string, Value>();
  private readonly inits = new Map<string, Tensor>();
  private readonly keep: Set<string>;
  private readonly reads: string[][];
  private readonly lastUse = new Map<string, number>();
  private readonly foreign = new Set<NumArray>();
  private readonly holders = new Map<NumArray, number>();
  private readonly weights: WeightCache;
  private readonly ownWeights: boolean;
  private idx = 0;

  constructor(readonly graph: Graph, inputs: Map<string, Value>, private readonly opts: GraphRunOptions & { weights?: WeightCache }) {
    for (const t of graph.initializers) this.inits.set(t.name, t);
    for (const [k, v] of inputs) this.env.set(k, inPrecision(v, opts.precision));
    // Buffers from the pool are handed back once no live value of this graph holds them. Arrays the caller or
    // an enclosing scope can still see are never handed back.
    for (const v of inputs.values()) this.foreign.add(v.data);
    this.weights = opts.weights ?? new WeightCache();
    this.ownWeights = !opts.weights;
    // last reader of each value, so intermediates can be dropped as soon as nobody needs them
    this.keep = new Set(graph.outputs.map((o) => o.name));
    this.reads = graph.nodes.map(readsOf);
    this.reads.forEach((names, i) => { for (const x of names) this.lastUse.set(x, i); });
  }

  get done(): boolean { return this.idx >= this.graph.nodes.length; }
  /** Share of the nodes run so far. */
  get progress(): number { return this.graph.nodes.length ? this.idx / this.graph.nodes.length : 1; }
  /** The node the next step runs. */
  get next(): Node | undefined { return this.graph.nodes[this.idx]; }

  private lookup(name: string): Value | undefined {
    const v = this.env.get(name);
    if (v) return v;
    const t = this.inits.get(name);
    if (t) return initializerValue(t, this.opts.precision, this.weights);
    const o = this.opts.outer?.get(name);
    if (o) this.foreign.add(o.data);
    return o;
  }

  // values alive count against the probe memory limit (budget.ts) while some name holds them
  private hold(v: Value): void {
    if (!isPooled(v.data)) return;
    const n = this.holders.get(v.data) ?? 0;
    if (n === 0) charge(v.data.byteLength);
    this.holders.set(v.data, n + 1);
  }

  private drop(name: string): void {
    const v = this.env.get(name);
    if (!v) return;
    this.env.delete(name);
    const n = this.holders.get(v.data);
    if (n === undefined) return;
    if (n > 1) { this.holders.set(v.data, n - 1); return; }
    this.holders.delete(v.data);
    release(v.data.byteLength);
    if (!this.foreign.has(v.data)) giveBack(v.data);
  }

  /** Run the next node. */
  step(): void {
    const idx = this.idx++;
    const node = this.graph.nodes[idx]!;
    const { precision, opsetOf } = this.opts;
    const env = this.env, keep = this.keep, lastUse = this.lastUse;
    evaluating(`node '${node.name || '(unnamed)'}' (${node.opType})`);
    this.weights.reader = node; // (lets a product's float32 weight go in as stored: see WeightCache.get)
    const args: Array<Value | undefined> = node.inputs.map((name) => {
      if (name === '') return undefined;
      const v = this.lookup(name);
      if (!v) {
        throw new PleatError('bad-model',
          `node '${node.name || '(unnamed)'}' (${node.opType}) reads '${name}', which no graph input, initializer or earlier node defines`);
      }
      return v;
    });
    const domain = node.domain === 'ai.onnx' ? '' : node.domain;
    const opset = opsetOf(domain);
    const kernel = getKernel(domain, node.opType, opset, node.name || '(unnamed)');
    const ctx: KernelContext = {
      node, opset, precision,
      runSubgraph: (sub: Graph, extra?: Map<string, Value>): Value[] => {
        // the subgraph sees this scope's live values and everything outer to it
        const res = runGraph(sub, extra ?? new Map(), { precision, opsetOf, outer: { get: (k) => this.lookup(k) }, onNode: this.opts.onNode });
        return sub.outputs.map((o) => res.get(o.name)!);
      },
      reusable: (i: number): boolean => {
        // the input's array is pooled, held by this one name only, which nothing reads after this node (no
        // graph output, no later node, no second input slot, not redefined by this node) and which is not the
        // caller's or an enclosing scope's
        const name = node.inputs[i];
        if (!name || keep.has(name) || lastUse.get(name) !== idx || !env.has(name)) return false;
        if (node.inputs.indexOf(name) !== i || node.inputs.lastIndexOf(name) !== i || node.outputs.includes(name)) return false;
        const data = env.get(name)!.data;
        return this.holders.get(data) === 1 && !this.foreign.has(data);
      },
    };
    let results: Value[];
    try {
      results = kernel.run(args, ctx);
    } catch (e) {
      // a typed array the engine cannot allocate is a size the budget check did not see: still the model's doing
      if (e instanceof RangeError) throw new PleatError('bad-model', `node '${node.name || '(unnamed)'}' (${node.opType}): ${e.message}`);
      throw e;
    }
    this.opts.onNode?.(node);
    node.outputs.forEach((name, i) => {
      if (name === '') return;
      const v = results[i];
      if (!v) return; // an optional output the kernel does not produce; a later read reports it by name
      if (v.data.length !== elementCount(v.dims)) {
        throw new PleatError('bad-model', `node '${node.name}' (${node.opType}): output '${name}' has ${v.data.length} values for dims [${v.dims.join(',')}]`);
      }
      if (env.has(name)) this.drop(name); // a name defined twice (invalid SSA) must not leak its hold
      env.set(name, v);
      this.hold(v);
      this.weights.noteResult(v.data); // a weight passed through must outlive the step
    });
    node.outputs.forEach((name) => { if (name && !keep.has(name) && !lastUse.has(name)) this.drop(name); });
    for (const name of this.reads[idx]!) if (lastUse.get(name) === idx && !keep.has(name)) this.drop(name);
    if (this.ownWeights) this.weights.clear();
  }

  /** The graph's outputs (after the last step). */
  outputs(): Map<string, Value> {
    const out = new Map<string, Value>();
    for (const o of this.graph.outputs) {
      const v = this.lookup(o.name);
      if (!v) throw new PleatError('bad-model', `graph '${this.graph.name}': output '${o.name}' is never computed`);
      // a decoded initializer handed to the caller is a copy, so the caller may change it freely
      out.set(o.name, isConstant(v.data) || (!this.env.has(o.name) && this.inits.has(o.name)) ? { ...v, data: v.data.slice() } : v);
    }
    if (this.ownWeights) this.weights.clear();
    return out;
  }
}

/** Evaluate a graph with outer-scope values (for subgraphs and for proving a fragment). */
export function runGraph(graph: Graph, inputs: Map<string, Value>, opts: GraphRunOptions): Map<string, Value> {
  const liveAtStart = liveBytes();
  try {
    const run = new GraphRun(graph, inputs, opts);
    while (!run.done) run.step();
    return run.outputs();
  } finally {
    resetLive(liveAtStart); // what is returned belongs to the caller; a failed run holds nothing
  }
}

/** A model's graph, inputs and opset lookup, checked for a run (see runModel). */
export function prepareRun(model: Model, inputs: Map<string, Value>): { graph: Graph; given: Map<string, Value>; opsetOf: (domain: string) => number } {
  const g = model.graph;
  const inits = new Set(g.initializers.map((t) => t.name));
  for (const i of g.inputs) {
    if (!inputs.has(i.name) && !inits.has(i.name)) {
      throw new PleatError('bad-input', `model input '${i.name}' has no value: give it one (it has no initializer default)`);
    }
    const v = inputs.get(i.name);
    if (v && i.elemType !== undefined && i.elemType !== v.type && !(isFloatType(i.elemType) && isFloatType(v.type))) {
      throw new PleatError('bad-input', `model input '${i.name}' expects ${dataTypeName(i.elemType)} but was given ${dataTypeName(v.type)}`);
    }
  }
  for (const name of inputs.keys()) {
    if (!g.inputs.some((i) => i.name === name)) throw new PleatError('bad-input', `the model has no input named '${name}'`);
  }
  // a float value given for a float input of another width takes the model's declared type
  const given = new Map<string, Value>();
  for (const [name, v] of inputs) {
    const decl = g.inputs.find((i) => i.name === name)?.elemType;
    given.set(name, decl !== undefined && decl !== v.type && isFloatType(decl) && isFloatType(v.type) ? { ...v, type: decl } : v);
  }
  const opsetOf = (domain: string): number => {
    const v = opsetVersion(model, domain);
    if (v === undefined) throw new PleatError('bad-model', `the model uses domain '${domain || 'ai.onnx'}' but imports no opset for it`);
    return v;
  };
  return { graph: g, given, opsetOf };
}

/** Evaluate a whole model. inputs: graph inputs by name (initializer-backed inputs default to the initializer). Returns graph outputs in graph order. */
export function runModel(model: Model, inputs: Map<string, Value>, opts: RunOptions): Map<string, Value> {
  const { graph, given, opsetOf } = prepareRun(model, inputs);
  return runGraph(graph, given, { precision: opts.precision, opsetOf, onNode: opts.onNode });
}
