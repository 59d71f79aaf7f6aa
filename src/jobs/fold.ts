// The fold job: read -> fold (each fold proven on its region) -> optional half-precision storage ->
// whole-model check -> write -> report. A failing whole-model gate writes nothing.
import type { Graph, Model, Node } from '../graph/ir.js';
import { readModelFile } from '../onnx/read.js';
import { sideFileName, stageModelFile, type StagedFile, type StagedModel } from '../onnx/write.js';
import { sideFilePaths } from '../onnx/external.js';
import { ownsSideFile } from '../onnx/side-owner.js';
import { basename, dirname, join } from 'node:path';
import { OutputSet } from './outputs.js';
import { withProbeMemory } from '../eval/budget.js';
import { storeFloat16 } from '../ship/store-float16.js';
import { foldModel } from '../fold/index.js';
import { LateRangeCheckFailed } from '../fold/values.js';
import { DEFAULT_GATES } from '../verify/gate.js';
import { asMap, dimSymbols, resolveInputs } from '../verify/inputs.js';
import { checkProbeEstimate } from '../verify/probe-budget.js';
import { PleatError } from '../errors.js';
import { setThreads, threadCount } from '../eval/threads.js';
import { checkOptionValues } from '../verify/option-values.js';
import { QUANT_THRESHOLD_DB, quantReadiness, roundedWeightsModel, type QuantRow } from '../fold/quant.js';
import { equalizeModel } from '../fold/equalize.js';
import type { Int8Granularity } from '../fold/int8.js';
import { checkJobNames } from './names.js';
import { checkOpset } from '../graph/opsets.js';
import type { ProbeRecord } from '../verify/compare.js';
import type { Estimate } from '../eval/estimate.js';
import { checkKit } from './check-kit.js';
import type { FoldLedger, RewrittenNode } from '../fold/types.js';
import type { Scope } from '../fold/scope.js';
import { EXTERNAL_KEY, externalSha256Later, provenanceOf, setProvenance, SOURCE_KEY } from './provenance.js';
import {
  SCHEMA_VERSION, type CheckSummary, type Coverage, type FoldJobOptions, type FoldReport, type Int8Output, type Int8Simulation, type StorageSummary,
} from './types.js';

/** A rewritten node as the check finds it again in any copy of the folded model: graph path and first output. */
export interface RewrittenKey {
  /** 'main' or e.g. 'main/gate_if.then_branch' (unnamed nodes on the path as op#index). */
  path: string;
  output: string;
  /** How reports name it (its ledger name, with its graph when not main). */
  name: string;
}

/** Every node of the model with its graph path, main first, bodies in node order. */
function eachNodeWithPath(model: Model, visit: (n: Node, path: string) => void): void {
  const walk = (g: Graph, path: string) => {
    g.nodes.forEach((n, i) => {
      visit(n, path);
      for (const a of n.attributes) {
        if (a.value.type !== 'GRAPH' && a.value.type !== 'GRAPHS') continue;
        const gs = a.value.type === 'GRAPH' ? [a.value.g] : a.value.graphs;
        gs.forEach((sg, k) => walk(sg, `${path}/${n.name || `${n.opType}#${i}`}.${a.name}${gs.length > 1 ? `[${k}]` : ''}`));
      }
    });
  };
  walk(model.graph, 'main');
}

/** Keys of the rewritten nodes in the folded model, so the check can watch them in a copy read back from disk. */
export function rewrittenKeys(folded: Model, rewritten: readonly RewrittenNode[]): RewrittenKey[] {
  const byNode = new Map(rewritten.map((r) => [r.node, r]));
  const out: RewrittenKey[] = [];
  eachNodeWithPath(folded, (n, path) => {
    const r = byNode.get(n);
    if (r && n.outputs[0]) out.push({ path, output: n.outputs[0], name: r.graph === 'main' ? r.label : `${r.label} in ${r.graph}` });
  });
  return out;
}

/** The folds' rewritten nodes, then the layers equalization changed that no fold had (a node once, with its first name). */
function withEqualized(folded: readonly RewrittenNode[], equalized: readonly RewrittenNode[]): readonly RewrittenNode[] {
  if (equalized.length === 0) return folded;
  const seen = new Set(folded.map((r) => r.node));
  return [...folded, ...equalized.filter((r) => !seen.has(r.node))];
}

/** The nodes of `model` the keys name, with their report names. */
function watchIn(model: Model, keys: readonly RewrittenKey[]): Map<Node, string> {
  // by path, then output (no joined key per node of the model: a graph of 10^5 nodes made as many strings)
  const want = new Map<string, Map<string, string>>();
  for (const k of keys) {
    let inPath = want.get(k.path);
    if (!inPath) want.set(k.path, inPath = new Map());
    inPath.set(k.output, k.name);
  }
  const out = new Map<Node, string>();
  let lastPath: string | undefined;
  let inPath: Map<string, string> | undefined;
  eachNodeWithPath(model, (n, path) => {
    if (path !== lastPath) { lastPath = path; inPath = want.get(path); }
    const name = inPath && n.outputs[0] !== undefined ? inPath.get(n.outputs[0]) : undefined;
    if (name !== undefined) out.set(n, name);
  });
  return out;
}

/** A rewritten node the checked copy does not hold counts as never executed. */
const withLost = (c: Coverage, lost: string[]): Coverage => (lost.length ? { ...c, total: c.total + lost.length, missed: [...c.missed, ...lost] } : c);

/** The gate the whole-model check applies to every output ('' means the default per data type). */
function checkGate(opts: FoldJobOptions & { halfGate?: boolean }): string | undefined {
  return opts.gate ?? (opts.halfGate ? DEFAULT_GATES.float16 : undefined);
}
import { sketches } from '../fold/sketch.js';
import { quantBeside, type ShippedFile } from './quant-beside.js';
import { startOriginalRuns, type OriginalRuns } from '../verify/original-runs.js';
import { DIGEST_PLACEHOLDER, fillDigest, sha256Later } from './sha256.js';

/**
 * The arithmetic of fold's whole-model check: float64, so the default gates judge the fold's own error (the
 * folded weights' rounding) and not the float32 rounding of two deep models. Measured on the 40-layer
 * 512-channel benchmark model: both models run in float32 differ by maxRel 4.6e-3 (cosine 1 - 2.6e-11), which is
 * float32 accumulation over 4,608-term sums in both models, not the fold; in float64 they differ by the folded
 * weights' rounding alone. compare's `arithmetic: 'float32'` runs the float32 comparison when that is wanted.
 */
export const CHECK_ARITHMETIC = 'float64' as const;

/**
 * Compare the original and the folded model on seeded probes, watching the rewritten nodes. The status follows
 * the rules of compare (verify/status.ts): skipped, never passed, when nothing could be compared.
 */
export function wholeModelCheck(original: Model, folded: Model, opts: FoldJobOptions & { halfGate?: boolean; sqnr?: number; rewritten?: readonly RewrittenKey[]; onProbe?: (p: ProbeRecord) => void;
  originalRuns?: OriginalRuns; estimateOfOriginal?: Estimate }): CheckSummary {
  const seed = opts.seed ?? 0;
  const probes = opts.probes ?? 2;
  const gate = checkGate(opts);
  const { dims, shapes } = inputsOf(original, opts);
  const watch = watchIn(folded, opts.rewritten ?? []);
  const found = new Set(watch.values());
  const lost = (opts.rewritten ?? []).filter((k) => !found.has(k.name)).map((k) => k.name);
  const r = checkKit().compare(original, folded, {
    inputs: opts.inputs, shapes, dims, seed, probes, gate, budget: false, watch, onProbe: opts.onProbe, maxProbeMemory: opts.maxProbeMemory, arithmetic: CHECK_ARITHMETIC,
    extraMetrics: opts.sqnr !== undefined ? { sqnr: opts.sqnr } : undefined,
    outputsOfA: opts.originalRuns, estimateOfA: opts.estimateOfOriginal, sideNames: ['the original model', 'the folded model'],
  });
  return {
    status: r.status,
    passed: r.passed,
    // compare names its sides A and B; here they are the original and the folded model
    skipped: r.skipped && { ...r.skipped, message: r.skipped.message.replace(/^model A\b/, 'the original model').replace(/^model B\b/, 'the folded model') },
    strict: opts.strict ?? false,
    probes: r.probes,
    ...(r.arithmetic ? { arithmetic: r.arithmetic } : {}),
    seed,
    gates: [...new Set(r.outputs.map((o) => o.gate?.expr).filter((g): g is string => !!g))],
    assumedDims: r.assumedDims,
    // a rewritten node the folded copy no longer holds counts as never executed
    coverage: r.coverage ? withLost(r.coverage, lost) : { executed: 0, total: 0, missed: [], extraProbes: 0 },
    outputs: r.outputs.map((o) => ({
      name: o.name,
      maxAbs: o.metrics?.maxAbs ?? NaN,
      maxRel: o.metrics?.maxRel ?? NaN,
      rms: o.metrics?.rms ?? NaN,
      cosine: o.metrics?.cosine ?? NaN,
      passed: o.passed,
      status: o.status,
      count: o.metrics?.count ?? 0,
      ...(o.problem ? { problem: o.problem } : {}),
      ...(o.observable !== undefined ? { observable: o.observable } : {}),
      ...(o.histogram ? { histogram: o.histogram } : {}),
      ...(o.gate?.limits ? { limits: o.gate.limits } : {}),
    })),
  };
}

/** Dims and shapes may come from a config or a batch shared by several models: use those this model has. */
function inputsOf(original: Model, opts: FoldJobOptions) {
  const symbols = dimSymbols([original.graph]);
  const inputNames = new Set(original.graph.inputs.map((i) => i.name));
  const dims = new Map([...asMap(opts.dims)].filter(([k]) => symbols.has(k)));
  const shapes = new Map([...asMap(opts.shapes)].filter(([k]) => inputNames.has(k)));
  return { dims, shapes };
}

/**
 * What 8-bit weights cost at the outputs, before and after the fold: the original and the folded model, each
 * with its linear layers' weights rounded through symmetric 8-bit quantize-dequantize, against the unrounded
 * original in float64 on the same seeded probes. Informational: no gate. Null when the probes cannot run.
 */
export function int8Simulation(original: Model, folded: Model, granularity: Int8Granularity, opts: FoldJobOptions): Int8Simulation | null {
  const { dims, shapes } = inputsOf(original, opts);
  const run = (m: Model) => checkKit().compare(original, roundedWeightsModel(m, granularity).model, {
    inputs: opts.inputs, shapes, dims, seed: opts.seed ?? 0, probes: opts.probes ?? 2, budget: false,
  });
  let before, after;
  try {
    before = run(original);
    after = run(folded);
  } catch (e) {
    if (e instanceof PleatError && (e.kind === 'missing-shape' || e.kind === 'unsupported-op')) return null;
    throw e;
  }
  // compare reports a model it cannot run as skipped with nothing compared
  if (before.outputs.length === 0 || after.outputs.length === 0) return null;
  const figures = (o: (typeof before.outputs)[number] | undefined) =>
    o?.metrics ? { maxAbs: o.metrics.maxAbs, maxRel: o.metrics.maxRel, cosine: o.metrics.cosine } : null;
  const outputs: Int8Output[] = before.outputs.map((o) => {
    const a = after.outputs.find((x) => x.name === o.name);
    const problem = o.problem ?? a?.problem;
    return { name: o.name, original: figures(o), folded: figures(a), ...(problem && !o.metrics ? { problem } : {}) };
  });
  return { granularity, probes: after.probes, outputs };
}

/**
 * Fold a model in memory (no files): returns the report; `model` is changed in place. `lateRangeCheck` is for
 * callers that can read the model again (see FoldOptions.lateRangeCheck).
 */
export function foldLoaded(model: Model, original: Model | undefined, label: string, opts: FoldJobOptions, lateRangeCheck = false, ship?: (m: Model) => Model,
  onProbe?: (p: ProbeRecord) => void, files?: JobFiles): FoldReport {
  if (opts.strict && opts.noProofs) throw new PleatError('usage', '--strict needs the whole-model check, which --unproven leaves out: give one of them');
  checkOptionValues(opts);
  checkOpset(model, label);
  checkJobNames(model, label, opts);
  // the proofs and the check run within the probe memory limit (src/eval/budget.ts)
  return withProbeMemory(opts.maxProbeMemory, () => foldWithin(model, original, label, opts, lateRangeCheck, ship, onProbe, files));
}

/**
 * Refuse, before any fold, a whole-model check whose probe would go beyond the probe memory limit. Returns the
 * estimate of the original model's run, which the check then uses as it is (the original is never edited).
 */
function checkProbeFits(original: Model, opts: FoldJobOptions): Estimate | undefined {
  const { dims, shapes } = inputsOf(original, opts);
  let specs;
  try {
    specs = resolveInputs(original.graph, asMap(opts.inputs), shapes, dims);
  } catch (e) {
    if (e instanceof PleatError) return undefined; // the check itself reports it (or is skipped for it)
    throw e;
  }
  return checkProbeEstimate(original.graph, specs);
}

/**
 * The fold's ledger, and its rewritten nodes when the whole-model check will watch them (they are worked out only
 * when asked for); the scopes go to `take`.
 */
function keepScopes(r: ReturnType<typeof foldModel>, watch: boolean, take: (s: Scope[]) => void): { ledger: FoldLedger; rewritten: readonly RewrittenNode[] } {
  take(r.scopes);
  return { ledger: r.ledger, rewritten: watch ? r.rewritten : [] };
}

/**
 * The files of a file job: the input, where `ship` wrote the folded model (known once it has), and the original
 * model's check runs when a thread works them out from the input (src/verify/original-runs.ts).
 */
export interface JobFiles { input: string; shipped(): ShippedFile; originalRuns?: OriginalRuns }

/** Whether a gate names the metric `sqnr` (then the quantization figures are needed before the check). */
const namesSqnr = (gate: string | undefined) => gate !== undefined && /\bsqnr\b/.test(gate);

function foldWithin(model: Model, original: Model | undefined, label: string, opts: FoldJobOptions, lateRangeCheck: boolean, ship?: (m: Model) => Model,
  onProbe?: (p: ProbeRecord) => void, files?: JobFiles): FoldReport {
  const estimateOfOriginal = original && !opts.noProofs ? checkProbeFits(original, opts) : undefined;
  // the fold's scopes (their indexes answer for the folded model) serve the quantization report, then go
  let foldScopes: Scope[] | undefined;
  const { ledger, rewritten } = keepScopes(foldModel(model, {
    keep: opts.keep,
    keepOrigins: opts.origins?.keep,
    allowOverridable: opts.allowOverridable,
    cloneShared: opts.cloneShared,
    inputShapes: asMap(opts.shapes),
    lateRangeCheck,
    prove: opts.noProofs ? undefined : (c) => {
      const r = checkKit().proveFold(c, { seed: opts.seed });
      return { passed: r.passed, proof: { maxAbs: r.maxAbs, maxRel: r.maxRel, shape: r.shape } };
    },
  }), original !== undefined && !opts.noProofs, (s) => { foldScopes = s; });
  const equalization = opts.equalize
    ? equalizeModel(model, { prove: opts.noProofs ? undefined : (c) => checkKit().proveFold(c, { seed: opts.seed }).passed })
    : undefined;
  const equalized = equalization?.pairs ?? [];
  const quantThresholdDb = opts.quantThresholdDb ?? QUANT_THRESHOLD_DB;
  const int8 = original && !opts.noProofs && opts.simulateInt8 ? int8Simulation(original, model, opts.simulateInt8, opts) : null;
  // A file job whose written weights are the folded float32 ones works the quantization report out on a thread
  // beside the writing and the check, from the input and the written file (src/jobs/quant-beside.ts); a gate
  // naming `sqnr` needs the figures before the check, so it keeps them on this thread.
  const beside = original && ship && files && opts.store !== 'float16' && !namesSqnr(opts.gate)
    ? quantBeside(files.input, ledger.normalizations, quantThresholdDb) : undefined;
  let quantization: QuantRow[] = [];
  let storage: StorageSummary | null = null;
  let check: CheckSummary | null;
  try {
    // quantization readiness reads the folded float32 weights, so it runs before half-precision storage
    // (the fold's scopes answer for the model as folded, unless equalization edited it since)
    if (original && !beside) quantization = quantReadiness(original, model, ledger.normalizations, quantThresholdDb, opts.equalize ? undefined : foldScopes);
    foldScopes = undefined; // not held through the whole-model check
    if (opts.store === 'float16') {
      const r = storeFloat16(model);
      storage = { store: 'float16', ...r };
    }
    // the gate may name `sqnr`: the lowest worst-channel per-tensor 8-bit SQNR of the folded layers (dB) (with the
    // report on its thread the gate does not name it, and the value is never read)
    const sqnr = beside ? NaN : Math.min(Infinity, ...quantization.map((q) => q.sqnrAfter.worstChannel));
    // the rewritten nodes, by graph path and output, so the check finds them again in the copy read from disk
    // (layers equalization changed count as the folds' do)
    const keys = original && !opts.noProofs ? rewrittenKeys(model, withEqualized(rewritten, equalization?.rewritten ?? [])) : [];
    // `ship` writes the model and gives it back as read from disk: the check then judges what ships.
    const shipped = ship ? ship(model) : model;
    beside?.shipped(files!.shipped());
    check = original && !opts.noProofs
      ? wholeModelCheck(original, shipped, { ...opts, halfGate: storage !== null, sqnr, rewritten: keys, onProbe, originalRuns: files?.originalRuns, estimateOfOriginal }) : null;
    // (a thread that failed: the same figures here, from the same written file)
    if (beside) quantization = beside.rows() ?? quantReadiness(original!, shipped, ledger.normalizations, quantThresholdDb);
  } finally {
    beside?.stop();
  }
  const failed = check !== null && (check.status === 'failed' || (check.status === 'skipped' && check.strict));
  return {
    schemaVersion: SCHEMA_VERSION,
    command: 'fold',
    model: label,
    output: null,
    ...ledger,
    bytesAfter: ledger.bytesAfter - (storage ? storage.bytesBefore - storage.bytesAfter : 0),
    // the Cast nodes half-precision storage adds are nodes of the written model
    nodesAfter: ledger.nodesAfter + (storage?.castNodes ?? 0),
    check,
    quantization,
    quantThresholdDb,
    equalized,
    int8,
    storage,
    probesSaved: null,
    failed,
  };
}

/** A fold whose outputs are staged (temporary names, checked) but not yet renamed in. */
export interface StagedFold {
  report: FoldReport;
  /** The staged model and side file, to commit with the run's other outputs (empty when the gate failed). */
  staged: StagedFile[];
  /** Real paths of the input model and its side files: no output of the run may overwrite them. */
  inputs: string[];
}

/**
 * Run `fn` with the evaluator's thread count set to `threads` (when given), then put back the count it had: a
 * library call's `threads` applies to that call only (it stayed set for every later call in the process).
 */
export function withThreads<T>(threads: number | undefined, fn: () => T): T {
  if (threads === undefined) return fn();
  const before = threadCount();
  setThreads(threads);
  try {
    return fn();
  } finally {
    setThreads(before);
  }
}

/** Read INPUT, fold, prove, and write OUTPUT unless a gate fails. The input file is never modified. */
export function foldFile(input: string, output: string, opts: FoldJobOptions = {}): FoldReport {
  checkOptionValues(opts);
  return withThreads(opts.threads, () => {
    const tx = new OutputSet();
    try {
      const r = foldStagedIn(tx, input, output, opts);
      tx.commit();
      return r.report;
    } catch (e) {
      tx.abort();
      throw e;
    }
  });
}

/**
 * Fold INPUT and stage OUTPUT (model and side file at temporary names, read back and checked), without renaming
 * anything in: the caller commits them together with its reports (see outputs.ts). Used by the CLI's workers.
 */
export function foldStaged(input: string, output: string, opts: FoldJobOptions = {}): StagedFold {
  checkOptionValues(opts);
  return withThreads(opts.threads, () => {
    const tx = new OutputSet();
    try {
      const r = foldStagedIn(tx, input, output, opts);
      return { ...r, staged: tx.handOver() };
    } catch (e) {
      tx.abort();
      throw e;
    }
  });
}

function foldStagedIn(tx: OutputSet, input: string, output: string, opts: FoldJobOptions): Omit<StagedFold, 'staged'> {
  try {
    return foldStagedOnce(tx, input, output, opts, true);
  } catch (e) {
    // A weight whose range check rode on its scaling does not fit after all: start again, checking up front,
    // so that fold is refused with storage-overflow like any other (nothing staged is kept).
    if (!(e instanceof LateRangeCheckFailed)) throw e;
    tx.discard(tx.handOverPending());
    return foldStagedOnce(tx, input, output, opts, false);
  }
}

function foldStagedOnce(tx: OutputSet, input: string, output: string, opts: FoldJobOptions, lateRangeCheck: boolean): Omit<StagedFold, 'staged'> {
  // the input's digest goes into the written model: for a large file it is worked out on a thread beside the
  // reading and the fold (or was started before, see startSha256), and waited for only when the model is staged
  const sha256 = sha256Later(input);
  const model = readModelFile(input);
  const inputs = [model.sourcePath!, ...sideFilePaths(model)];
  inputs.forEach((p, i) => tx.protect(p, i === 0 ? 'input model' : `input model's side file`));
  // a source with external data records its side files' digest too, worked out the same way (a model without
  // side files records what it always did)
  const external = inputs.length > 1 ? externalSha256Later(model) : undefined;
  // the probe folder is an output like the model: claimed first, written at a temporary name, renamed in with it
  if (opts.saveProbes !== undefined) tx.reserveFolder(opts.saveProbes, '--save-probes');
  // Decide every destination before any work: the model, and its side file if one may be written.
  const dest = tx.reserve(output, 'output');
  const side = join(dirname(dest), sideFileName(basename(dest)));
  const mayHaveSide = opts.externalThreshold !== undefined || inputs.length > 1;
  if (mayHaveSide) tx.reserve(side, 'side file', dest);
  // A second, untouched copy is the reference for the whole-model check and the quantization report.
  const original = opts.noProofs ? undefined : readModelFile(input);
  const gate = checkGate({ ...opts, halfGate: opts.store === 'float16' });
  let staged: StagedModel | undefined;
  const stage = (m: Model, status: string) => {
    // A digest still being worked out is not waited for: the file is written with a placeholder of its length,
    // and the digest goes over it once known (the hash of a large input then runs beside the writing).
    const known = sha256.ready(), externalKnown = external?.ready() ?? true;
    setProvenance(m, provenanceOf(known ? sha256() : DIGEST_PLACEHOLDER, gate, opts, status, external && (externalKnown ? external() : DIGEST_PLACEHOLDER)));
    staged = stageModelFile(m, dest, { externalThreshold: opts.externalThreshold }, (d) => tx.tempFor(d));
    tx.add(staged.files);
    if (known && externalKnown) return;
    setProvenance(m, provenanceOf(sha256(), gate, opts, status, external?.()));
    const tmp = staged.files[0]!.tmp;
    if ((known || fillDigest(tmp, SOURCE_KEY, sha256())) && (externalKnown || fillDigest(tmp, EXTERNAL_KEY, external!()))) return;
    tx.discard(staged.files);
    staged = stageModelFile(m, dest, { externalThreshold: opts.externalThreshold }, (d) => tx.tempFor(d));
    tx.add(staged.files);
  };
  let shippedModel: Model | undefined;
  const ship = (m: Model): Model => {
    shippedModel = m;
    // The file is staged before the check runs, so it says `passed`, the only status it can ship with unless
    // the check is skipped; then it is staged again below with `skipped` (same weights, same bytes but that).
    stage(m, opts.noProofs ? 'not-run' : 'passed');
    if (opts.noProofs) return m;
    const back = readModelFile(staged!.files[0]!.tmp, staged!.redirect);
    back.sourcePath = dest;
    return back;
  };
  const records: ProbeRecord[] = [];
  // The original model's side of the check needs nothing of the fold: with threads to spare, a thread runs it
  // from the input while this one folds, proves and writes (given inputs and saved probes keep it here).
  const originalRuns = original && asMap(opts.inputs).size === 0 && opts.saveProbes === undefined && threadCount() > 1
    ? startOriginalRuns(input, original, { ...inputsOf(original, opts), seed: opts.seed ?? 0, probes: opts.probes ?? 2, maxProbeMemory: opts.maxProbeMemory }) : undefined;
  const files: JobFiles = { input, shipped: () => ({ path: staged!.files[0]!.tmp, redirect: staged!.redirect }), originalRuns };
  let report: FoldReport;
  try {
    report = foldLoaded(model, original, input, opts, lateRangeCheck, ship, opts.saveProbes !== undefined ? (p) => records.push(p) : undefined, files);
  } finally {
    originalRuns?.stop();
  }
  if (opts.pageDetail) {
    report.sha256 = sha256();
    if (external) report.externalSha256 = external();
    report.sketches = sketches(original ?? readModelFile(input), report.normalizations, model);
  }
  if (report.failed) {
    tx.discard(staged?.files ?? []);
  } else {
    if (report.check && report.check.status !== 'passed' && shippedModel) {
      tx.discard(staged?.files ?? []);
      stage(shippedModel, report.check.status);
    }
    report.output = output;
    // The model this run replaces kept its weights in OUT.data; the new one keeps them inline and does not read it.
    // The file is not this run's to remove (nothing was asked of it): it stays, and the report says so.
    if (staged && staged.files.length === 1 && ownsSideFile(dest, side)) report.staleSideFile = join(dirname(output), basename(side));
    if (opts.saveProbes !== undefined && original) {
      let sets = 0;
      tx.stageFolder(opts.saveProbes, (tmp) => { sets = checkKit().saveProbeSets(tmp, original.graph, records); });
      report.probesSaved = { dir: opts.saveProbes, sets };
    }
  }
  external?.stop(); // (its thread, when nothing asked for the digest: a failed gate writes nothing)
  return { report, inputs };
}
