// The reference evaluator: runs a graph's nodes in list order (ONNX requires topological order), each through
// its registered kernel, freeing intermediate values once their last reader has run.
import { PleatError } from '../errors.js';
import { DataType, attrInt, opsetVersion, elementCount, type Graph, type Model, type Node, type Tensor } from '../graph/ir.js';
import { peekBytes } from '../graph/lazy-bytes.js';
import { isOnDisk } from '../onnx/sparse-read.js';
import { isFloatType, tensorToFloat64, dataTypeName } from '../graph/tensor.js';
import { getKernel } from './registry.js';
import { forgetPacked, markStaged, stagingFor } from './gemm.js';
import { freshFloat64, giveBack, isConstant, isPooled, markConstant, markTransient } from './pool.js';
import { charge, evaluatingNode, liveBytes, release, resetLive } from './budget.js';
import { planOf, type Plan } from './plan.js';
import type { Kernel, KernelContext, NumArray, Precision, Value } from './value.js';

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
function rawFloat32(t: Tensor, into?: Uint8Array): Float32Array | undefined {
  const s = t.storage;
  if (t.dataType !== DataType.FLOAT || (s.kind !== 'raw' && s.kind !== 'external')) return undefined;
  const n = elementCount(t.dims);
  if (s.bytes.byteLength < n * 4) return undefined; // the general decoder reports it
  const bytes = peekBytes(s.bytes.subarray(0, n * 4), into);
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

/**
 * Where the weight of Conv node `n` can be read straight into the matrix kernel's memory (gemm.ts stagingFor): a
 * float32 weight on disk that the node reads as W only, with one group and more than one input channel per group
 * (so its one product, A = W as a whole, is all the kernel memory holds while the weight is alive: no depthwise
 * layout, no product per group). Undefined otherwise.
 */
function convStaging(n: Node, t: Tensor): Uint8Array | undefined {
  if (n.opType !== 'Conv' || t.dataType !== DataType.FLOAT || t.dims.length < 3) return undefined;
  if (n.inputs[1] !== t.name || n.inputs.indexOf(t.name) !== 1 || n.inputs.lastIndexOf(t.name) !== 1) return undefined;
  if (attrInt(n, 'group', 1) !== 1 || t.dims[1]! < 2) return undefined;
  const s = t.storage;
  if ((s.kind !== 'raw' && s.kind !== 'external') || !isOnDisk(s.bytes)) return undefined;
  return stagingFor(t.dims[0]!, elementCount(t.dims) / t.dims[0]!);
}

/** Kernels that read their operands element by element into float64 arithmetic, whatever the input array type. */
const WIDENING_KERNELS = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);

/**
 * Buffers of large weights dropped after their step, kept by size for the next weight of that size: a fresh
 * buffer per weight (tens of MiB each on a large model) is faulted in page by page and lingers until the
 * collector runs, which multiplied a proven fold's peak memory. Up to 256 MiB are kept.
 */
class SpareBuffers<T extends Float64Array | Uint8Array> {
  private readonly bySize = new Map<number, T[]>();
  private bytes = 0;
  take(length: number): T | undefined {
    const a = this.bySize.get(length)?.pop();
    if (a) this.bytes -= a.byteLength;
    return a;
  }
  put(a: T): void {
    if (this.bytes + a.byteLength > 256 * 1024 * 1024) return;
    this.bytes += a.byteLength;
    const list = this.bySize.get(a.length) ?? [];
    list.push(a);
    this.bySize.set(a.length, list);
  }
}

/** Float64 buffers of decoded weights; byte buffers that float32 weights on disk are read into as stored. */
const spare = new SpareBuffers<Float64Array>(), spareRaw = new SpareBuffers<Uint8Array>();

function takeSpare(n: number): Float64Array | undefined {
  const a = spare.take(n);
  if (a) forgetPacked(a); // its packed copy in the kernel memory belongs to the weight it held
  return a;
}

/**
 * Decoded large weights shared by several runs stepping through one model together (the probes of a lockstep
 * check): the driver clears it after every run has taken the node, so each weight is decoded once per pass.
 */
export class WeightCache {
  private readonly held = new Map<Tensor, NumArray>();
  /** Decoded arrays some node's result holds (a kernel that passes its input through): never reused. */
  private readonly escaped = new Set<NumArray>();
  /** Weights read as stored into a reused byte buffer, with that buffer (it goes back when they are dropped). */
  private readonly readInto = new Map<NumArray, Uint8Array>();
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
      let asStored: Float32Array | undefined;
      if (large && precision === 'float64' && this.reader !== undefined && WIDENING_KERNELS.has(this.reader.opType) && (this.reader.domain === '' || this.reader.domain === 'ai.onnx')) {
        // a Conv's weight goes straight into the kernel memory where its product would copy it (see convStaging)
        const staging = convStaging(this.reader, t);
        if (staging) {
          asStored = rawFloat32(t, staging);
          if (asStored && asStored.buffer === staging.buffer && asStored.byteOffset === staging.byteOffset) markStaged(asStored);
        } else {
          const bytes = elementCount(t.dims) * 4;
          const into = spareRaw.take(bytes) ?? new Uint8Array(bytes);
          asStored = rawFloat32(t, into);
          if (asStored && asStored.buffer === into.buffer) this.readInto.set(asStored, into);
          else spareRaw.put(into); // the bytes were in memory: the buffer was not needed
        }
      }
      // small ones into a slab view (pool.ts): an array of its own per small weight per step costs the collector more
      const n = elementCount(t.dims);
      d = asStored ?? decodeFor(t, precision, precision !== 'float64' ? undefined : large ? takeSpare(n) : n <= 256 ? freshFloat64(n) : undefined);
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
      if (this.escaped.has(d)) continue;
      if (d instanceof Float64Array && d.length > KEEP_DECODED_MAX) spare.put(d);
      const raw = this.readInto.get(d);
      if (raw) { forgetPacked(d); spareRaw.put(raw); }
    }
    this.held.clear();
    this.escaped.clear();
    this.readInto.clear();
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

/** Values visible from enclosing scopes (a Map is one). */
export interface OuterValues { get(name: string): Value | undefined }

/**
 * One run of a graph, a node at a time (`step`), so several runs can advance together: the probes of a check,
 * and the original and folded model in lockstep. Intermediate values are dropped once their last reader has
 * run; large weights are decoded when their node runs and dropped after it. Values are held by slot (plan.ts).
 */
export class GraphRun {
  private readonly plan: Plan;
  private readonly env: Array<Value | undefined>;
  /** Values given for names the graph never mentions (an enclosing scope may still ask for them by name). */
  private extra: Map<string, Value> | undefined;
  /**
   * Pooled arrays the caller or an enclosing scope can still see (only pooled arrays are ever held, so only they
   * are asked about). The three collections are made when first needed: a fold's proof runs thousands of tiny graphs.
   */
  private foreign: Set<NumArray> | undefined;
  private holders: Map<NumArray, number> | undefined;
  private readonly weights: WeightCache;
  private readonly ownWeights: boolean;
  /** The context handed to every kernel of this run (its node and opset change per step). */
  private readonly ctx: KernelContext;
  private idx = 0;
  private domain: string | undefined;
  private opset = 0;

  /** `plan`: the graph's plan, when the caller made it already (runs of one graph side by side share it). */
  constructor(readonly graph: Graph, inputs: Map<string, Value>, private readonly opts: GraphRunOptions & { weights?: WeightCache; plan?: Plan }) {
    const plan = this.plan = opts.plan?.graph === graph ? opts.plan : planOf(graph);
    this.env = new Array<Value | undefined>(plan.names.length);
    for (const [k, v] of inputs) {
      const value = inPrecision(v, opts.precision);
      const s = plan.slotOf.get(k);
      if (s === undefined) (this.extra ??= new Map()).set(k, value); else this.env[s] = value;
    }
    // Buffers from the pool are handed back once no live value of this graph holds them. Arrays the caller or
    // an enclosing scope can still see are never handed back.
    for (const v of inputs.values()) this.markForeign(v.data);
    this.weights = opts.weights ?? new WeightCache();
    this.ownWeights = !opts.weights;
    const { precision, opsetOf } = opts;
    this.ctx = {
      node: graph.nodes[0]!, opset: 0, precision,
      // the subgraph sees this scope's live values and everything outer to it
      runSubgraph: (sub: Graph, extra?: Map<string, Value>): Value[] => {
        const res = runGraph(sub, extra ?? new Map(), { precision, opsetOf, outer: { get: (k) => this.lookup(k) }, onNode: this.opts.onNode });
        return sub.outputs.map((o) => res.get(o.name)!);
      },
      reusable: (i: number): boolean => this.reusable(i),
    };
  }

  get done(): boolean { return this.idx >= this.graph.nodes.length; }
  /** Share of the nodes run so far. */
  get progress(): number { return this.graph.nodes.length ? this.idx / this.graph.nodes.length : 1; }
  /** The node the next step runs. */
  get next(): Node | undefined { return this.graph.nodes[this.idx]; }

  private slotValue(s: number): Value | undefined {
    const v = this.env[s];
    if (v) return v;
    const t = this.plan.init[s];
    if (t) return initializerValue(t, this.opts.precision, this.weights);
    const o = this.opts.outer?.get(this.plan.names[s]!);
    if (o) this.markForeign(o.data);
    return o;
  }

  private lookup(name: string): Value | undefined {
    const s = this.plan.slotOf.get(name);
    if (s !== undefined) return this.slotValue(s);
    const v = this.extra?.get(name);
    if (v) return v;
    const o = this.opts.outer?.get(name);
    if (o) this.markForeign(o.data);
    return o;
  }

  private markForeign(data: NumArray): void {
    if (isPooled(data)) (this.foreign ??= new Set()).add(data);
  }

  // values alive count against the probe memory limit (budget.ts) while some name holds them
  private hold(v: Value): void {
    if (!isPooled(v.data)) return;
    const holders = (this.holders ??= new Map());
    const n = holders.get(v.data) ?? 0;
    if (n === 0) charge(v.data.byteLength);
    holders.set(v.data, n + 1);
  }

  private drop(s: number): void {
    const v = this.env[s];
    if (!v) return;
    this.env[s] = undefined;
    const n = this.holders?.get(v.data);
    if (n === undefined) return;
    if (n > 1) { this.holders!.set(v.data, n - 1); return; }
    this.holders!.delete(v.data);
    release(v.data.byteLength);
    if (!this.foreign?.has(v.data)) giveBack(v.data);
  }

  /**
   * Whether the node being run may overwrite input i: its array is pooled, held by this one name only, which
   * nothing reads after this node (no graph output, no later node, no second input slot, not redefined by this
   * node) and which is not the caller's or an enclosing scope's.
   */
  private reusable(i: number): boolean {
    const idx = this.idx - 1;
    const node = this.graph.nodes[idx]!;
    const plan = this.plan;
    const name = node.inputs[i];
    if (!name) return false;
    const s = plan.inSlot[plan.inStart[idx]! + i]!;
    if (plan.keep[s] || plan.lastUse[s] !== idx || !this.env[s]) return false;
    if (node.inputs.indexOf(name) !== i || node.inputs.lastIndexOf(name) !== i || node.outputs.includes(name)) return false;
    const data = this.env[s]!.data;
    return this.holders?.get(data) === 1 && !this.foreign?.has(data);
  }

  private kernelFor(idx: number, node: Node): { kernel: Kernel; opset: number } {
    const domain = node.domain === 'ai.onnx' ? '' : node.domain;
    if (domain !== this.domain) { this.opset = this.opts.opsetOf(domain); this.domain = domain; }
    const opset = this.opset;
    const plan = this.plan;
    let kernel = plan.kernel[idx];
    if (!kernel || plan.kernelOpset[idx] !== opset || kernel.op !== node.opType || kernel.domain !== domain) {
      kernel = getKernel(domain, node.opType, opset, node.name || '(unnamed)');
      plan.kernel[idx] = kernel;
      plan.kernelOpset[idx] = opset;
    }
    return { kernel, opset };
  }

  /** Run the next node. */
  step(): void {
    const idx = this.idx++;
    const node = this.graph.nodes[idx]!;
    const plan = this.plan, env = this.env;
    evaluatingNode(node);
    this.weights.reader = node; // (lets a product's float32 weight go in as stored: see WeightCache.get)
    const a = plan.inStart[idx]!, b = plan.inStart[idx + 1]!;
    const args = new Array<Value | undefined>(b - a);
    for (let k = a; k < b; k++) {
      const s = plan.inSlot[k]!;
      if (s < 0) { args[k - a] = undefined; continue; }
      const v = this.slotValue(s);
      if (!v) {
        throw new PleatError('bad-model',
          `node '${node.name || '(unnamed)'}' (${node.opType}) reads '${plan.names[s]}', which no graph input, initializer or earlier node defines`);
      }
      args[k - a] = v;
    }
    const { kernel, opset } = this.kernelFor(idx, node);
    const ctx = this.ctx;
    ctx.node = node;
    ctx.opset = opset;
    let results: Value[];
    try {
      results = kernel.run(args, ctx);
    } catch (e) {
      // a typed array the engine cannot allocate is a size the budget check did not see: still the model's doing
      if (e instanceof RangeError) throw new PleatError('bad-model', `node '${node.name || '(unnamed)'}' (${node.opType}): ${e.message}`);
      throw e;
    }
    this.opts.onNode?.(node);
    const oa = plan.outStart[idx]!, ob = plan.outStart[idx + 1]!;
    for (let k = oa; k < ob; k++) {
      const s = plan.outSlot[k]!;
      if (s < 0) continue;
      const v = results[k - oa];
      if (!v) continue; // an optional output the kernel does not produce; a later read reports it by name
      if (v.data.length !== elementCount(v.dims)) {
        throw new PleatError('bad-model', `node '${node.name}' (${node.opType}): output '${plan.names[s]}' has ${v.data.length} values for dims [${v.dims.join(',')}]`);
      }
      if (env[s]) this.drop(s); // a name defined twice (invalid SSA) must not leak its hold
      env[s] = v;
      this.hold(v);
      this.weights.noteResult(v.data); // a weight passed through must outlive the step
    }
    for (let k = plan.dropStart[idx]!, end = plan.dropStart[idx + 1]!; k < end; k++) this.drop(plan.dropSlot[k]!);
    if (this.ownWeights) this.weights.clear();
  }

  /** The graph's outputs (after the last step). */
  outputs(): Map<string, Value> {
    const out = new Map<string, Value>();
    for (const o of this.graph.outputs) {
      const v = this.lookup(o.name);
      if (!v) throw new PleatError('bad-model', `graph '${this.graph.name}': output '${o.name}' is never computed`);
      // a decoded initializer handed to the caller is a copy, so the caller may change it freely
      const s = this.plan.slotOf.get(o.name)!;
      out.set(o.name, isConstant(v.data) || (!this.env[s] && this.plan.init[s] !== undefined) ? { ...v, data: v.data.slice() } : v);
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
  // the initializer names only matter for inputs given no value (a set of every name costs as much as a run of a small graph)
  let inits: Set<string> | undefined;
  const isInit = (name: string) => (inits ??= new Set(g.initializers.map((t) => t.name))).has(name);
  for (const i of g.inputs) {
    if (!inputs.has(i.name) && !isInit(i.name)) {
      throw new PleatError('bad-input', `model input '${i.name}' has no value: give it one (it has no initializer default)`);
    }
    const v = inputs.get(i.name);
    if (v && i.elemType !== undefined && i.elemType !== v.type && !(isFloatType(i.elemType) && isFloatType(v.type))) {
      throw new PleatError('bad-input', `model input '${i.name}' expects ${dataTypeName(i.elemType)} but was given ${dataTypeName(v.type)}`);
    }
  }
  const declared = new Map<string, Graph['inputs'][number]>();
  for (const i of g.inputs) if (!declared.has(i.name)) declared.set(i.name, i);
  for (const name of inputs.keys()) {
    if (!declared.has(name)) throw new PleatError('bad-input', `the model has no input named '${name}'`);
  }
  // a float value given for a float input of another width takes the model's declared type
  const given = new Map<string, Value>();
  for (const [name, v] of inputs) {
    const decl = declared.get(name)?.elemType;
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
