// The reference evaluator: runs a graph's nodes in list order (ONNX requires topological order), each through
// its registered kernel, freeing intermediate values once their last reader has run.
import { PleatError } from '../errors.js';
import { opsetVersion, subgraphsOf, elementCount, type Graph, type Model, type Node, type Tensor } from '../graph/ir.js';
import { isFloatType, tensorToFloat64, dataTypeName } from '../graph/tensor.js';
import { getKernel } from './registry.js';
import { giveBack, isConstant, isPooled, markConstant } from './pool.js';
import { charge, evaluating, liveBytes, release, resetLive } from './budget.js';
import type { KernelContext, NumArray, Precision, Value } from './value.js';

export interface RunOptions { precision: Precision; }

export interface GraphRunOptions extends RunOptions {
  opsetOf: (domain: string) => number;
  outer?: Map<string, Value>;
}

/** Turn an initializer/Constant tensor into a Value in the given precision. */
export function tensorToValue(t: Tensor, precision: Precision): Value {
  const f64 = tensorToFloat64(t);
  const data = precision === 'float32' && isFloatType(t.dataType) ? Float32Array.from(f64) : f64;
  return { type: t.dataType, dims: [...t.dims], data };
}

// Decoded initializers, so repeated runs of one model (probes, both precisions) decode each weight once. Keyed
// by the storage object, which every edit replaces (setTensorValues); dims and type are checked as well.
interface Decoded { dims: string; type: number; f64?: Float64Array; f32?: Float32Array }
const decoded = new WeakMap<object, Decoded>();

function initializerValue(t: Tensor, precision: Precision): Value {
  const key = t.dims.join(',');
  let d = decoded.get(t.storage);
  if (!d || d.dims !== key || d.type !== t.dataType) { d = { dims: key, type: t.dataType }; decoded.set(t.storage, d); }
  const f32 = precision === 'float32' && isFloatType(t.dataType);
  let data: NumArray | undefined = f32 ? d.f32 : d.f64;
  if (!data) {
    const v = tensorToValue(t, precision);
    data = v.data;
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

/** Evaluate a graph with outer-scope values (for subgraphs and for proving a fragment). */
export function runGraph(graph: Graph, inputs: Map<string, Value>, opts: GraphRunOptions): Map<string, Value> {
  const liveAtStart = liveBytes();
  try {
    return runNodes(graph, inputs, opts);
  } finally {
    resetLive(liveAtStart); // what is returned belongs to the caller; a failed run holds nothing
  }
}

function runNodes(graph: Graph, inputs: Map<string, Value>, opts: GraphRunOptions): Map<string, Value> {
  const { precision, opsetOf } = opts;
  const outer = opts.outer;
  const env = new Map<string, Value>();
  for (const t of graph.initializers) env.set(t.name, initializerValue(t, precision));
  for (const [k, v] of inputs) env.set(k, inPrecision(v, precision));

  const lookup = (name: string): Value | undefined => env.get(name) ?? outer?.get(name);

  // Buffers from the pool are handed back once no live value of this graph holds them. Arrays the caller or an
  // enclosing scope can still see are never handed back.
  const foreign = new Set<NumArray>();
  for (const v of inputs.values()) foreign.add(v.data);
  if (outer) for (const v of outer.values()) foreign.add(v.data);
  const holders = new Map<NumArray, number>();
  // values alive count against the probe memory limit (budget.ts) while some name holds them
  const hold = (v: Value) => {
    if (!isPooled(v.data)) return;
    const n = holders.get(v.data) ?? 0;
    if (n === 0) charge(v.data.byteLength);
    holders.set(v.data, n + 1);
  };
  const drop = (name: string) => {
    const v = env.get(name);
    if (!v) return;
    env.delete(name);
    const n = holders.get(v.data);
    if (n === undefined) return;
    if (n > 1) { holders.set(v.data, n - 1); return; }
    holders.delete(v.data);
    release(v.data.byteLength);
    if (!foreign.has(v.data)) giveBack(v.data);
  };

  // last reader of each value, so intermediates can be dropped as soon as nobody needs them
  const keep = new Set(graph.outputs.map((o) => o.name));
  const reads = graph.nodes.map(readsOf);
  const lastUse = new Map<string, number>();
  reads.forEach((names, i) => { for (const x of names) lastUse.set(x, i); });

  graph.nodes.forEach((node, idx) => {
    evaluating(`node '${node.name || '(unnamed)'}' (${node.opType})`);
    const args: Array<Value | undefined> = node.inputs.map((name) => {
      if (name === '') return undefined;
      const v = lookup(name);
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
      runSubgraph(sub: Graph, extra?: Map<string, Value>): Value[] {
        // the subgraph sees this scope's live values and everything outer to it
        const scope = new Map<string, Value>(outer ?? []);
        for (const [k, v] of env) scope.set(k, v);
        const res = runGraph(sub, extra ?? new Map(), { precision, opsetOf, outer: scope });
        return sub.outputs.map((o) => res.get(o.name)!);
      },
      reusable(i: number): boolean {
        // the input's array is pooled, held by this one name only, which nothing reads after this node (no
        // graph output, no later node, no second input slot, not redefined by this node) and which is not the
        // caller's or an enclosing scope's
        const name = node.inputs[i];
        if (!name || keep.has(name) || lastUse.get(name) !== idx || !env.has(name)) return false;
        if (node.inputs.indexOf(name) !== i || node.inputs.lastIndexOf(name) !== i || node.outputs.includes(name)) return false;
        const data = env.get(name)!.data;
        return holders.get(data) === 1 && !foreign.has(data);
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
    node.outputs.forEach((name, i) => {
      if (name === '') return;
      const v = results[i];
      if (!v) return; // an optional output the kernel does not produce; a later read reports it by name
      if (v.data.length !== elementCount(v.dims)) {
        throw new PleatError('bad-model', `node '${node.name}' (${node.opType}): output '${name}' has ${v.data.length} values for dims [${v.dims.join(',')}]`);
      }
      if (env.has(name)) drop(name); // a name defined twice (invalid SSA) must not leak its hold
      env.set(name, v);
      hold(v);
    });
    node.outputs.forEach((name) => { if (name && !keep.has(name) && !lastUse.has(name)) drop(name); });
    for (const name of reads[idx]!) if (lastUse.get(name) === idx && !keep.has(name)) drop(name);
  });

  const out = new Map<string, Value>();
  for (const o of graph.outputs) {
    const v = lookup(o.name);
    if (!v) throw new PleatError('bad-model', `graph '${graph.name}': output '${o.name}' is never computed`);
    // a cached initializer handed to the caller is a copy, so the caller may change it freely
    out.set(o.name, isConstant(v.data) ? { ...v, data: v.data.slice() } : v);
  }
  return out;
}

/** Evaluate a whole model. inputs: graph inputs by name (initializer-backed inputs default to the initializer). Returns graph outputs in graph order. */
export function runModel(model: Model, inputs: Map<string, Value>, opts: RunOptions): Map<string, Value> {
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
  return runGraph(g, given, { precision: opts.precision, opsetOf });
}
