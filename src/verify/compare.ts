// `compare`: run two models on the same inputs and judge, output by output, whether B computes what A does.
// A in float64 is the reference. B in float64 against it is what the gate judges by default; the error
// budget adds A and B in float32 against the same reference, so a report can tell error the rewrite added
// from rounding the model already had. Agreement on probe inputs is evidence, not proof, of agreement on real
// data.
import { attrInt, DataType, subgraphsOf, type DataTypeCode, type Graph, type Model, type Node } from '../graph/ir.js';
import { isRandomOp } from '../eval/registry.js';
import { basename } from 'node:path';
import type { Precision, Value } from '../eval/value.js';
import { runLockstep } from '../eval/lockstep.js';
import { withGraphsHeldStill } from '../eval/plan.js';
import { probeMemoryLimit, withProbeMemory } from '../eval/budget.js';
import { estimateRun, type Estimate } from '../eval/estimate.js';
import { checkEstimateFits, checkProbeEstimate, checkProbeShapes } from './probe-budget.js';
import { PleatError } from '../errors.js';
import { dataTypeName } from '../graph/tensor.js';
import { wideOutputValue } from './wide-integers.js';
import { atOutputScale, computeMetrics, diffHistogram, finiteInBoth, worstOf, type DiffHistogram, type Metrics } from './metrics.js';
import { BUDGET_NAMES, DEFAULT_GATES, defaultGateFor, defaultGateKey, INT8_WEIGHTS_GATE, METRIC_NAMES, parseGate, type Gate, type GateLimit, type GateScope } from './gate.js';
import { roundedWeightsModel } from '../fold/quant.js';
import type { Int8Granularity } from '../fold/int8.js';
import {
  asMap, checkDimFlags, checkProbeCount, checkSeed, makeProbe, refuseEmptyProbeDims, resolveInputs, summarizeInputs,
  type AssumedDim, type InputOptions, type InputSpec, type InputSummary, type InputValue,
} from './inputs.js';
import { checkStatus, missedNodes, upstreamOfOutputs, type CheckStatus, type Coverage, type SkipInfo } from './status.js';

export type { CheckStatus, Coverage, SkipInfo, SkipReason } from './status.js';

/** One probe as --save-probes keeps it: the inputs, and model A's outputs in float64 and in float32. */
export interface ProbeRecord {
  index: number;
  inputs: Map<string, Value>;
  float64: Map<string, Value>;
  float32: Map<string, Value>;
}

export interface CompareOptions extends InputOptions {
  /** Number of seeded input sets (--probes); default 3. When every input is given, one run is enough. */
  probes?: number;
  /** One gate expression for every output (--gate); default: the gate for each output's element type. */
  gate?: string;
  /** Also run both models in float32 to measure the error budget; default true (float64 arithmetic only). */
  budget?: boolean;
  /** Probe memory limit in bytes (--max-probe-memory); default DEFAULT_PROBE_MEMORY (src/eval/budget.ts). */
  maxProbeMemory?: number;
  /**
   * Nodes of model B to watch (a fold's rewritten nodes), each with the name the report gives it. The report
   * then says which ran (coverage), draws extra probes while some have not, and marks outputs that stayed
   * bit-identical although a watched node upstream ran.
   */
  watch?: ReadonlyMap<Node, string>;
  /** Most extra seeded probes drawn while a watched node has not run; default 8. */
  extraProbes?: number;
  /** Receives every probe with A's outputs in float64 and float32 (for --save-probes). */
  onProbe?: (p: ProbeRecord) => void;
  /**
   * The arithmetic both models run in for the judged comparison; default float64 (B in float64 against A in
   * float64). float32 runs both as a deployment runtime would (fold's default check: see checkArithmetic).
   */
  arithmetic?: Precision;
  /**
   * Run B with its Conv/Gemm/MatMul weights rounded through symmetric 8-bit quantize-dequantize (per tensor or
   * per output channel), against A unrounded: what an 8-bit weight deployment of B would cost.
   */
  simulateInt8?: Int8Granularity;
  /** What a message calls the two models (default 'model A' and 'model B'; fold's check: the original and the folded model). */
  sideNames?: readonly [string, string];
  /** More names a gate may use, with one value for every output (fold's check adds `sqnr`). */
  extraMetrics?: Record<string, number>;
  /**
   * Model A's runs in the judged arithmetic, done elsewhere (fold's check runs the original model on its own
   * thread, src/verify/original-runs.ts). Used for a probe only when its inputs there are this comparison's bit
   * for bit and no error budget is measured; otherwise A runs here.
   */
  outputsOfA?: RunsElsewhere;
  /**
   * The estimate of one run of A on these very inputs, already worked out by the caller (fold refuses a probe
   * too large before folding, from the same inputs): A's graph is not estimated again.
   */
  estimateOfA?: Estimate;
}

/** Runs of a model done elsewhere, per probe index. */
export interface RunsElsewhere {
  /** Whether probe p is (being) run there; never waits. */
  has(probe: number): boolean;
  /** Probe p's inputs and the model's outputs (waiting for them), or undefined when there are none. */
  get(probe: number): { inputs: Map<string, Value>; outputs: Map<string, Value> } | undefined;
}

export const DEFAULT_PROBES = 3;
/** Bound on the extra probes drawn for coverage (our choice: a few seeded tries, not a search). */
export const DEFAULT_EXTRA_PROBES = 8;

/**
 * 'compared'; 'empty' when the output had no elements on any probe, or none that is a finite number in both
 * models, and 'wide-integers' when an int64/uint64 output held a value at or beyond 2^53 (nothing compared: the
 * check is skipped); or why an output could not be compared (each is a failure).
 */
export type OutputStatus = 'compared' | 'empty' | 'wide-integers' | 'only-in-a' | 'only-in-b' | 'shape-differs';

export interface ErrorBudget {
  /** A in float32 against A in float64: the rounding the model already has. */
  own: Metrics;
  /** B in float32 against A in float64: what deploying B costs. */
  deploy: Metrics;
  /** max(0, deploy.maxAbs - own.maxAbs): absolute error B adds beyond A's own rounding. */
  addedAbs: number;
  /** max(0, deploy.maxRel - own.maxRel). */
  addedRel: number;
}

export interface GateResult {
  expr: string;
  source: 'default' | 'user';
  passed: boolean;
  /** The bounds the expression puts on maxAbs or maxRel, evaluated on this output's metrics. */
  limits?: GateLimit[];
}

export interface OutputComparison {
  name: string;
  status: OutputStatus;
  /** Element type in A (in B for an output only B has). */
  dtype: string;
  /** B's element type when it differs from A's. */
  dtypeB?: string;
  /** Dims in A on the first probe (in B for an output only B has). */
  dims: number[];
  /** B's dims when they differ. */
  dimsB?: number[];
  /** B (float64) against A (float64), worst over probes. */
  metrics?: Metrics;
  budget?: ErrorBudget;
  /** How |B - A| (float64, the values the metrics judge) is spread over the elements of every probe. */
  histogram?: DiffHistogram;
  gate?: GateResult;
  passed: boolean;
  /** One line saying what went wrong, when something did. */
  problem?: string;
  /**
   * With watched nodes: false when the output stayed bit-identical over every probe although a watched node
   * upstream of it ran (saturation, e.g. a sigmoid at exactly 1.0): the change was not observable there.
   * True when it differed; absent when no watched node upstream ran.
   */
  observable?: boolean;
}

export interface CompareReport {
  /** 'passed' only when at least one probe compared at least one element of every output. */
  status: CheckStatus;
  /** Why nothing (or not every output) was compared; null unless status is 'skipped'. */
  skipped: SkipInfo | null;
  /** status === 'passed'. */
  passed: boolean;
  /**
   * Weights each model stores in half precision and casts to float32 where read (as fold --store float16
   * writes them): then float32 outputs are judged by the float16 gate, since the weights carry float16 rounding.
   */
  halfPrecisionWeights: { a: number; b: number };
  /** The arithmetic of the judged runs. */
  arithmetic: Precision;
  seed: number;
  /** Input sets actually run (extra coverage probes included). */
  probes: number;
  budget: boolean;
  /** Symbolic dims no flag or file set, which the probes took as 1. */
  assumedDims: AssumedDim[];
  inputs: InputSummary[];
  outputs: OutputComparison[];
  /** Which watched nodes ran; present when nodes were watched. */
  coverage?: Coverage;
  /** Where --save-probes wrote the probes; present when asked. */
  probesSaved?: { dir: string; sets: number };
  /** Set when B ran with 8-bit weights (--simulate-int8 weights): how, and how many layers were rounded. */
  int8Weights?: { granularity: Int8Granularity; layers: number };
}

const LOOSENESS = ['exact', 'float64', 'float32', 'float16', 'bfloat16'] as const;

/** The default gate for an output whose two sides may have different types: the looser one. */
function defaultGate(a: DataTypeCode, b: DataTypeCode | undefined): string {
  if (b === undefined) return defaultGateFor(a);
  return LOOSENESS.indexOf(defaultGateKey(b)) > LOOSENESS.indexOf(defaultGateKey(a)) ? defaultGateFor(b) : defaultGateFor(a);
}

/** Initializers stored as float16 or bfloat16 that a Cast to float32 reads (in any graph of the model). */
export function halfStoredWeights(model: Model): string[] {
  const found: string[] = [];
  const walk = (g: Graph, outer: ReadonlyMap<string, DataTypeCode>) => {
    // the initializers' types are needed only where some node is a Cast or holds a subgraph (most graphs: none)
    if (!g.nodes.some((n) => n.opType === 'Cast' || subgraphsOf(n).length > 0)) return;
    const types = new Map(outer);
    for (const t of g.initializers) types.set(t.name, t.dataType);
    for (const n of g.nodes) {
      if (n.opType === 'Cast' && (n.domain === '' || n.domain === 'ai.onnx') && attrInt(n, 'to', 0) === DataType.FLOAT) {
        const t = types.get(n.inputs[0] ?? '');
        if (t === DataType.FLOAT16 || t === DataType.BFLOAT16) found.push(n.inputs[0]!);
      }
      for (const sg of subgraphsOf(n)) walk(sg, types);
    }
  };
  walk(model.graph, new Map());
  return [...new Set(found)];
}

const sameDims = (x: readonly number[], y: readonly number[]) => x.length === y.length && x.every((d, i) => d === y[i]);

let takenElsewhere = 0;
/** Probes whose model A outputs came from CompareOptions.outputsOfA so far (tests check they were used). */
export function probesOfATakenElsewhere(): number { return takenElsewhere; }

/** Whether two value sets hold the same names, types, dims and element bits. */
function sameValues(x: ReadonlyMap<string, Value>, y: ReadonlyMap<string, Value>): boolean {
  if (x.size !== y.size) return false;
  for (const [name, v] of x) {
    const w = y.get(name);
    if (!w || w.type !== v.type || !sameDims(v.dims, w.dims) || v.data.constructor !== w.data.constructor || v.data.length !== w.data.length) return false;
    const a = new Uint8Array(v.data.buffer, v.data.byteOffset, v.data.byteLength), b = new Uint8Array(w.data.buffer, w.data.byteOffset, w.data.byteLength);
    for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  }
  return true;
}

/** Check that B takes exactly the inputs A is given, with types and shapes its declarations accept. */
function checkCandidateInputs(b: Model, first: Map<string, Value>): void {
  const bInits = new Set(b.graph.initializers.map((t) => t.name));
  const bInputs = new Set(b.graph.inputs.map((i) => i.name));
  for (const name of first.keys()) {
    if (!bInputs.has(name)) throw new PleatError('bad-input', `model B has no input '${name}', which model A takes: both models must take the same inputs`);
  }
  for (const i of b.graph.inputs) {
    if (!first.has(i.name) && !bInits.has(i.name)) {
      throw new PleatError('bad-input', `model B needs input '${i.name}', which model A does not take: both models must take the same inputs`);
    }
  }
  const given = new Map<string, InputValue>();
  for (const [k, v] of first) given.set(k, { ...v, file: "model A's input" });
  try {
    resolveInputs(b.graph, given);
  } catch (e) {
    if (e instanceof PleatError) throw new PleatError(e.kind, `model B: ${e.message}`);
    throw e;
  }
}

/** Prefix an expected failure with which model it was ("model B (folded.onnx), float64 run: ..."). */
function labelled(e: unknown, model: Model, side: string, precision: Precision): unknown {
  if (!(e instanceof PleatError)) return e;
  const file = model.sourcePath ? ` (${basename(model.sourcePath)})` : '';
  return new PleatError(e.kind, `${side}${file}, ${precision} run: ${e.message}`);
}

/** True when some node, in any graph of the model, draws random numbers (two runs cannot be compared). */
function hasRandomOp(m: Model): boolean {
  const visit = (g: Graph): boolean => g.nodes.some((n) => isRandomOp(n.domain, n.opType) || subgraphsOf(n).some(visit));
  return visit(m.graph);
}

/** Run A and B on the same inputs and judge each output against its gate. Never throws for disagreeing outputs. */
export function compare(a: Model, b: Model, opts: CompareOptions = {}): CompareReport {
  // neither model is edited while it is compared: each graph is planned for evaluation once (src/eval/plan.ts)
  return withProbeMemory(opts.maxProbeMemory, () => withGraphsHeldStill(() => compareWithin(a, b, opts)));
}

function compareWithin(a: Model, b: Model, opts: CompareOptions): CompareReport {
  const int8 = opts.simulateInt8 ? roundedWeightsModel(b, opts.simulateInt8) : undefined;
  if (int8) b = int8.model;
  const seed = opts.seed ?? 0;
  const arithmetic: Precision = opts.arithmetic ?? 'float64';
  // the budget measures float32 runs against float64 ones: nothing to measure when the judged runs are float32
  const budget = arithmetic === 'float64' && (opts.budget ?? true);
  const extra = opts.extraMetrics ?? {};
  const sideName = opts.sideNames ?? ['model A', 'model B'] as const;
  const available = [...(budget ? [...METRIC_NAMES, ...BUDGET_NAMES] : [...METRIC_NAMES]), ...Object.keys(extra)];
  const userGate = opts.gate !== undefined ? parseGate(opts.gate, available) : undefined;
  const requested = opts.probes ?? DEFAULT_PROBES;
  checkProbeCount(requested);
  checkSeed(seed);

  const dims = asMap(opts.dims);
  const shapes = asMap(opts.shapes);
  checkDimFlags(dims, [a.graph, b.graph]);
  refuseEmptyProbeDims(dims, shapes);
  const assumedDims: AssumedDim[] = [];
  const half = { a: halfStoredWeights(a).length, b: halfStoredWeights(b).length };
  const skippedReport = (skipped: SkipInfo, specs: InputSpec[] = []): CompareReport => ({
    status: 'skipped', skipped, passed: false, halfPrecisionWeights: half, arithmetic, seed, probes: 0, budget, assumedDims, inputs: summarizeInputs(specs), outputs: [],
    ...(opts.watch ? { coverage: { executed: 0, total: opts.watch.size, missed: missedNodes(opts.watch, new Set()), extraProbes: 0 } } : {}),
  });
  let specs: InputSpec[];
  try {
    specs = resolveInputs(a.graph, asMap(opts.inputs), shapes, dims, assumedDims);
  } catch (e) {
    if (e instanceof PleatError && e.kind === 'missing-shape') return skippedReport({ reason: 'no-shape', message: e.message });
    throw e;
  }
  const allGiven = specs.every((s) => s.given);
  const probes = allGiven ? 1 : requested;
  const extraLimit = allGiven || !opts.watch ? 0 : opts.extraProbes ?? DEFAULT_EXTRA_PROBES;
  // before anything runs: sizes, and the values a probe would make
  // (a given estimate is held to the limit in force here, as one worked out here would be)
  const estimateA = opts.estimateOfA ? (checkProbeShapes(specs), checkEstimateFits(opts.estimateOfA)) : checkProbeEstimate(a.graph, specs);

  const aOut = a.graph.outputs;
  const bOut = new Map(b.graph.outputs.map((o) => [o.name, o]));
  const aNames = new Set(aOut.map((o) => o.name));

  // Per output shared by both: metrics per probe, or the first shape difference.
  interface Acc {
    histogram?: DiffHistogram; metrics: Metrics[]; finite: number; own: Metrics[]; deploy: Metrics[]; dimsA?: number[]; dimsB?: number[];
    shapeDiffers: boolean; typeA?: DataTypeCode; typeB?: DataTypeCode;
    /** The first int64/uint64 value at or beyond 2^53 either model gave here (float64 may have rounded it). */
    wide?: string;
  }
  const acc = new Map<string, Acc>();
  for (const o of aOut) if (bOut.has(o.name)) acc.set(o.name, { metrics: [], finite: 0, own: [], deploy: [], shapeDiffers: false });
  const onlyB = new Map<string, Value>();
  const onlyA = new Map<string, Value>();
  const watch = opts.watch;
  const executed = new Set<Node>();
  const onNode = watch ? (n: Node) => { if (watch.has(n)) executed.add(n); } : undefined;

  const probeInputs = Array.from({ length: probes }, (_, p) => makeProbe(specs, seed, p));
  checkCandidateInputs(b, probeInputs[0]!);
  // A and B run together, node by node (src/eval/lockstep.ts), in the judged arithmetic, then (for the error
  // budget) both again in float32. The probes of a pass run together, so each weight is decoded and laid out for
  // the kernels once per model and pass, when the values they hold at once (estimated from the shapes, as if none
  // were freed) fit in half the probe memory limit; otherwise one probe per pass, so at most one value set of
  // each model is alive at once. B's judged run reports the nodes it executes (coverage of the watched nodes).
  const pair = (model: 'judged' | 'float32', batch: Array<Map<string, Value>>) => {
    const precision: Precision = model === 'judged' ? arithmetic : 'float32';
    const sides = [{ model: a, side: 'A' as const }, { model: b, side: 'B' as const }];
    let failed = -1;
    let out;
    try {
      out = runLockstep(sides.map((x) => ({ model: x.model, precision, probes: batch, onNode: x.side === 'B' && model === 'judged' ? onNode : undefined })),
        (e, i) => { failed = i; return labelled(e, sides[i]!.model, sideName[i]!, precision); });
    } catch (e) {
      throw failed === 1 ? originalFailsToo(e, batch, precision) : withDimHint(e, failed);
    }
    return batch.map((_, q) => [out[0]![q]!, out[1]![q]!] as const);
  };
  /**
   * B failed on a batch: when A fails on it too, A's error is the one to show (the probe inputs are what neither
   * model can run, not the fold), else B's. (The two run in lockstep, so either may meet the problem first.)
   */
  const originalFailsToo = (eB: unknown, batch: Array<Map<string, Value>>, precision: Precision): unknown => {
    if (!(eB instanceof PleatError) || eB.kind === 'unsupported-op') return eB;
    try {
      runLockstep([{ model: a, precision, probes: batch }], (e) => labelled(e, a, sideName[0], precision));
    } catch (eA) {
      if (eA instanceof PleatError) return withDimHint(eA, 0);
    }
    return eB;
  };
  /** A's failure at probe shapes that took size 1 for symbolic dims no flag set: say so, and name --dim. */
  const withDimHint = (e: unknown, side: number): unknown => {
    if (side !== 0 || !(e instanceof PleatError) || e.kind === 'unsupported-op' || !assumedDims.length) return e;
    const syms = assumedDims.map((d) => d.symbol);
    return new PleatError(e.kind, `${e.message}; the probe inputs took size 1 for the symbolic dim${syms.length === 1 ? '' : 's'} ${syms.join(', ')} (no --dim given), a shape the original model cannot run: set sizes it runs at with ${syms.map((d) => `--dim ${d}=<size>`).join(' ')}`);
  };
  /** A's outputs for probes first.. of a batch from opts.outputsOfA, when it has every one for these very inputs. */
  const doneElsewhere = (elsewhere: RunsElsewhere, first: number, batch: Array<Map<string, Value>>): Array<Map<string, Value>> | undefined => {
    const outs: Array<Map<string, Value>> = [];
    for (let q = 0; q < batch.length; q++) {
      const got = elsewhere.get(first + q);
      if (!got || !sameValues(got.inputs, batch[q]!)) return undefined;
      outs.push(got.outputs);
    }
    return outs;
  };
  /**
   * The judged pair for a batch: B alone against A's outputs done elsewhere, or both here. B runs first (A's runs
   * may still be under way); whenever A's outputs turn out not to be there, the pair runs here as it would have
   * without them, so the results and any error are the same. B failing while A ran fine is B's error either way.
   */
  const judgedPair = (first: number, batch: Array<Map<string, Value>>) => {
    const elsewhere = opts.outputsOfA;
    if (!elsewhere || budget || !batch.every((_, q) => elsewhere.has(first + q))) return pair('judged', batch);
    let outB;
    try {
      outB = runLockstep([{ model: b, precision: arithmetic, probes: batch, onNode }], (e) => labelled(e, b, sideName[1], arithmetic))[0]!;
    } catch (e) {
      if (doneElsewhere(elsewhere, first, batch)) throw e;
      return pair('judged', batch);
    }
    const a = doneElsewhere(elsewhere, first, batch);
    if (!a) return pair('judged', batch);
    takenElsewhere += a.length;
    return batch.map((_, q) => [a[q]!, outB[q]!] as const);
  };
  /** A alone in one arithmetic (the outputs --save-probes keeps that the comparison did not compute). */
  const aAlone = (precision: Precision, inputs: Map<string, Value>) =>
    runLockstep([{ model: a, precision, probes: [inputs] }], (e) => labelled(e, a, sideName[0], precision))[0]![0]!;
  const together = probes > 1 && probes * 2 * estimateA.totalBytes <= probeMemoryLimit() / 2
    && probes * (estimateA.totalBytes + estimateRun(b.graph, new Map(specs.map((s) => [s.name, s.given ? s.given.dims : s.dims]))).totalBytes) <= probeMemoryLimit() / 2;
  let run = 0;
  try {
    for (let p = 0; p < probes + extraLimit;) {
      if (p >= probes && executed.size === watch!.size) break;
      const count = p < probes && together ? probes - p : 1;
      const batch = Array.from({ length: count }, (_, q) => probeInputs[p + q] ?? makeProbe(specs, seed, p + q));
      const judged = judgedPair(p, batch);
      const f32 = budget ? pair('float32', batch) : undefined;
      for (let q = 0; q < count; q++, p++) {
        const inputs = batch[q]!;
        const [ra, rb] = judged[q]!;
        const [ra32, rb32] = f32 ? f32[q]! : [undefined, undefined];
        if (opts.onProbe) {
          const a64 = arithmetic === 'float64' ? ra : aAlone('float64', inputs);
          const a32 = ra32 ?? (arithmetic === 'float32' ? ra : aAlone('float32', inputs));
          opts.onProbe({ index: p, inputs, float64: a64, float32: a32 });
        }
        run++;
        if (p === 0) {
          for (const o of aOut) if (!bOut.has(o.name)) onlyA.set(o.name, ra.get(o.name)!);
          for (const o of b.graph.outputs) if (!aNames.has(o.name)) onlyB.set(o.name, rb.get(o.name)!);
        }
        for (const [name, s] of acc) {
          const va = ra.get(name)!, vb = rb.get(name)!;
          if (p === 0) { s.dimsA = [...va.dims]; s.dimsB = [...vb.dims]; s.typeA = va.type; s.typeB = vb.type; }
          if (s.shapeDiffers) continue;
          if (!sameDims(va.dims, vb.dims)) { s.shapeDiffers = true; s.dimsA = [...va.dims]; s.dimsB = [...vb.dims]; continue; }
          if (!s.wide) {
            const wa = wideOutputValue(va.type, va.data), wb = wa ? undefined : wideOutputValue(vb.type, vb.data);
            if (wa || wb) s.wide = `${(wa ?? wb)!.text} (model ${wa ? 'A' : 'B'}, probe ${p}, element ${(wa ?? wb)!.index})`;
          }
          s.metrics.push(computeMetrics(vb.data, va.data));
          if (s.finite === 0) s.finite = finiteInBoth(vb.data, va.data); // (only whether there is one matters)
          s.histogram = diffHistogram(vb.data, va.data, s.histogram);
          if (ra32 && rb32) {
            const a32 = ra32.get(name)!, b32 = rb32.get(name)!;
            // float32 runs take the same shapes as float64 runs of the same model; B's were just checked against A's
            s.own.push(computeMetrics(a32.data, va.data));
            s.deploy.push(computeMetrics(b32.data, va.data));
          }
        }
      }
    }
  } catch (e) {
    // an operator pleat cannot evaluate leaves nothing compared: the check is skipped, never passed
    if (e instanceof PleatError && e.kind === 'unsupported-op') {
      return skippedReport({ reason: hasRandomOp(a) || hasRandomOp(b) ? 'random-op' : 'no-kernel', message: e.message }, specs);
    }
    throw e;
  }

  const upstream = watch ? upstreamOfOutputs(b.graph, watch) : undefined;
  const outputs: OutputComparison[] = [];
  for (const o of aOut) {
    const s = acc.get(o.name);
    if (!s) {
      const v = onlyA.get(o.name)!;
      outputs.push({ name: o.name, status: 'only-in-a', dtype: dataTypeName(v.type), dims: [...v.dims], passed: false,
        problem: `model B has no output '${o.name}'` });
      continue;
    }
    const out: OutputComparison = { name: o.name, status: 'compared', dtype: dataTypeName(s.typeA!), dims: s.dimsA!, passed: false };
    if (s.typeB !== s.typeA) out.dtypeB = dataTypeName(s.typeB!);
    if (s.shapeDiffers) {
      out.status = 'shape-differs';
      out.dimsB = s.dimsB!;
      out.problem = `output '${o.name}' has shape [${s.dimsA!.join(',')}] in model A but [${s.dimsB!.join(',')}] in model B`;
      outputs.push(out);
      continue;
    }
    const metrics = worstOf(atOutputScale(s.metrics));
    out.metrics = metrics;
    if (s.metrics.every((m) => m.count === 0)) {
      out.status = 'empty';
      out.problem = `output '${o.name}' has no elements on any probe, so nothing was compared`;
      outputs.push(out);
      continue;
    }
    // NaN or the same infinity everywhere on both sides agrees, but compares nothing: skipped, never passed (a
    // difference there, NaN on one side only or unequal infinities, still fails below)
    if (s.finite === 0 && metrics.maxAbs === 0 && metrics.nanMismatches === 0) {
      out.status = 'empty';
      out.problem = `output '${o.name}' has no element that is a finite number in both models on any probe (NaN or infinite throughout), so nothing was compared`;
      outputs.push(out);
      continue;
    }
    // an integer at or beyond 2^53 may be float64's rounding of the true value: not compared, never passed
    if (s.wide) {
      out.status = 'wide-integers';
      out.problem = `output '${o.name}' holds ${s.wide}, at or beyond 2^53 where float64 no longer holds every integer, so it was not compared`;
      outputs.push(out);
      continue;
    }
    if (s.histogram) out.histogram = s.histogram;
    const scope: GateScope = { ...extra, ...metrics };
    if (budget) {
      const own = worstOf(atOutputScale(s.own)), deploy = worstOf(atOutputScale(s.deploy));
      const b: ErrorBudget = { own, deploy, addedAbs: Math.max(0, deploy.maxAbs - own.maxAbs), addedRel: Math.max(0, deploy.maxRel - own.maxRel) };
      out.budget = b;
      Object.assign(scope, { ownAbs: own.maxAbs, ownRel: own.maxRel, deployAbs: deploy.maxAbs, deployRel: deploy.maxRel, addedAbs: b.addedAbs, addedRel: b.addedRel });
    }
    // float32 outputs of a model whose weights are stored in half precision carry float16 rounding
    const halfGate = (half.a > 0 || half.b > 0) && [s.typeA, s.typeB].every((t) => t === DataType.FLOAT);
    const fallback = int8 && defaultGateKey(s.typeA!) !== 'exact' ? INT8_WEIGHTS_GATE
      : halfGate ? DEFAULT_GATES.float16 : defaultGate(s.typeA!, s.typeB);
    const gate: Gate = userGate ?? parseGate(fallback, available);
    const passed = gate.test(scope);
    out.gate = { expr: gate.expr, source: userGate ? 'user' : 'default', passed, limits: gate.limits(scope) };
    out.passed = passed;
    if (!passed) {
      // the gate may read figures that are not this output's own (sqnr, of the weights): name them, or the
      // failure reads as this output's while every figure shown for it passes
      const wide = gate.names.filter((n) => Object.hasOwn(extra, n)).map((n) => `${n} = ${extra[n]}`);
      out.problem = `output '${o.name}' fails the gate '${gate.expr}'${wide.length ? ` (with the model-wide ${wide.join(', ')})` : ''}`;
    }
    if (upstream && [...(upstream.get(o.name) ?? [])].some((n) => executed.has(n))) {
      out.observable = !(metrics.maxAbs === 0 && metrics.nanMismatches === 0);
    }
    outputs.push(out);
  }
  for (const [name, v] of onlyB) {
    outputs.push({ name, status: 'only-in-b', dtype: dataTypeName(v.type), dims: [...v.dims], passed: false,
      problem: `model A has no output '${name}'` });
  }
  const { status, skipped } = checkStatus(outputs);
  const report: CompareReport = {
    status, skipped, passed: status === 'passed', halfPrecisionWeights: half, arithmetic, seed, probes: run, budget, assumedDims, inputs: summarizeInputs(specs), outputs,
    ...(int8 && opts.simulateInt8 ? { int8Weights: { granularity: opts.simulateInt8, layers: int8.layers } } : {}),
  };
  if (watch) report.coverage = { executed: executed.size, total: watch.size, missed: missedNodes(watch, executed), extraProbes: run - Math.min(run, probes) };
  return report;
}

