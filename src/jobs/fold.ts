// The fold job: read -> fold (each fold proven on its region) -> optional half-precision storage ->
// whole-model check -> write -> report. A failing whole-model gate writes nothing.
import type { Model } from '../graph/ir.js';
import { readModelFile } from '../onnx/read.js';
import { writeModelFile } from '../onnx/write.js';
import { storeFloat16 } from '../ship/store-float16.js';
import { foldModel } from '../fold/index.js';
import { LateRangeCheckFailed } from '../fold/values.js';
import { proveFold } from '../verify/prove.js';
import { compare } from '../verify/compare.js';
import { DEFAULT_GATES } from '../verify/gate.js';
import { asMap, dimSymbols } from '../verify/inputs.js';
import { PleatError } from '../errors.js';
import { QUANT_THRESHOLD_DB, quantReadiness, roundedWeightsModel } from '../fold/quant.js';
import { equalizeModel } from '../fold/equalize.js';
import type { Int8Granularity } from '../fold/int8.js';
import { SCHEMA_VERSION, type CheckSummary, type FoldJobOptions, type FoldReport, type Int8Output, type Int8Simulation, type StorageSummary } from './types.js';
import { sketches } from '../fold/sketch.js';
import { fileSha256 } from './sha256.js';

/** Compare the original and the folded model on seeded probes; skipped (not failed) when shapes are unknown. */
export function wholeModelCheck(original: Model, folded: Model, opts: FoldJobOptions & { halfGate?: boolean; sqnr?: number }): CheckSummary {
  const seed = opts.seed ?? 0;
  const probes = opts.probes ?? 2;
  const gate = opts.gate ?? (opts.halfGate ? DEFAULT_GATES.float16 : undefined);
  const { dims, shapes } = inputsOf(original, opts);
  try {
    const r = compare(original, folded, {
      inputs: opts.inputs, shapes, dims, seed, probes, gate, budget: false, extraMetrics: opts.sqnr !== undefined ? { sqnr: opts.sqnr } : undefined,
    });
    return {
      passed: r.passed,
      skipped: null,
      probes: r.probes,
      seed,
      gates: [...new Set(r.outputs.map((o) => o.gate?.expr).filter((g): g is string => !!g))],
      outputs: r.outputs.map((o) => ({
        name: o.name,
        maxAbs: o.metrics?.maxAbs ?? NaN,
        maxRel: o.metrics?.maxRel ?? NaN,
        rms: o.metrics?.rms ?? NaN,
        cosine: o.metrics?.cosine ?? NaN,
        passed: o.passed,
        ...(o.problem ? { problem: o.problem } : {}),
        ...(o.histogram ? { histogram: o.histogram } : {}),
        ...(o.gate ? { limits: o.gate.limits } : {}),
      })),
    };
  } catch (e) {
    if (e instanceof PleatError && (e.kind === 'missing-shape' || e.kind === 'unsupported-op')) {
      return { passed: true, skipped: e.message, probes: 0, seed, gates: [], outputs: [] };
    }
    throw e;
  }
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
  const run = (m: Model) => compare(original, roundedWeightsModel(m, granularity).model, {
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
export function foldLoaded(model: Model, original: Model | undefined, label: string, opts: FoldJobOptions, lateRangeCheck = false): FoldReport {
  const { ledger } = foldModel(model, {
    keep: opts.keep,
    allowOverridable: opts.allowOverridable,
    lateRangeCheck,
    prove: opts.noProofs ? undefined : (c) => proveFold(c, { seed: opts.seed }).passed,
  });
  const equalized = opts.equalize
    ? equalizeModel(model, { prove: opts.noProofs ? undefined : (c) => proveFold(c, { seed: opts.seed }).passed })
    : [];
  const quantThresholdDb = opts.quantThresholdDb ?? QUANT_THRESHOLD_DB;
  const int8 = original && !opts.noProofs && opts.simulateInt8 ? int8Simulation(original, model, opts.simulateInt8, opts) : null;
  let storage: StorageSummary | null = null;
  if (opts.store === 'float16') {
    const r = storeFloat16(model);
    storage = { store: 'float16', ...r };
  }
  const quantization = original ? quantReadiness(original, model, ledger.normalizations, quantThresholdDb) : [];
  // the gate may name `sqnr`: the lowest worst-channel per-tensor 8-bit SQNR of the folded layers (dB)
  const sqnr = Math.min(Infinity, ...quantization.map((q) => q.sqnrAfter.worstChannel));
  const check = original && !opts.noProofs ? wholeModelCheck(original, model, { ...opts, halfGate: storage !== null, sqnr }) : null;
  const failed = check !== null && !check.passed;
  return {
    schemaVersion: SCHEMA_VERSION,
    command: 'fold',
    model: label,
    output: null,
    ...ledger,
    bytesAfter: ledger.bytesAfter - (storage ? storage.bytesBefore - storage.bytesAfter : 0),
    check,
    quantization,
    quantThresholdDb,
    equalized,
    int8,
    storage,
    failed,
  };
}

/** Read INPUT, fold, prove, and write OUTPUT unless a gate fails. The input file is never modified. */
export function foldFile(input: string, output: string, opts: FoldJobOptions = {}): FoldReport {
  try {
    return foldFileOnce(input, output, opts, true);
  } catch (e) {
    // A weight whose range check rode on its scaling does not fit after all: start again, checking up front,
    // so that fold is refused with storage-overflow like any other (nothing was written: writes are atomic).
    if (!(e instanceof LateRangeCheckFailed)) throw e;
    return foldFileOnce(input, output, opts, false);
  }
}

function foldFileOnce(input: string, output: string, opts: FoldJobOptions, lateRangeCheck: boolean): FoldReport {
  const model = readModelFile(input);
  // A second, untouched copy is the reference for the whole-model check and the quantization report.
  const original = opts.noProofs ? undefined : readModelFile(input);
  const report = foldLoaded(model, original, input, opts, lateRangeCheck);
  if (opts.pageDetail) {
    report.sha256 = fileSha256(input);
    report.sketches = sketches(original ?? readModelFile(input), report.normalizations, model);
  }
  if (!report.failed) {
    writeModelFile(model, output, { externalThreshold: opts.externalThreshold });
    report.output = output;
  }
  return report;
}
