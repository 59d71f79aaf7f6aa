// The report shapes every job returns. The CLI's --json prints exactly these; the JSON Schema in
// src/report/schema/pleat-report.schema.json documents them. Bump SCHEMA_VERSION on any breaking change.
import type { Finding, LedgerEntry } from '../fold/types.js';
import type { AssumedDim, InputOptions } from '../verify/inputs.js';
import type { CheckStatus, Coverage, SkipInfo } from '../verify/status.js';
import type { OutputStatus } from '../verify/compare.js';
import type { QuantRow } from '../fold/quant.js';
import type { Float16Result } from '../ship/store-float16.js';
import type { NameOrigins } from './names.js';
import type { DiffHistogram } from '../verify/metrics.js';
import type { GateLimit } from '../verify/gate.js';
import type { Sketch } from '../fold/sketch.js';
import type { EqualizedPair } from '../fold/equalize.js';
import type { Int8Granularity } from '../fold/int8.js';

export type { QuantRow, EqualizedPair, Int8Granularity, AssumedDim, CheckStatus, Coverage, OutputStatus, SkipInfo, Sketch };

export const SCHEMA_VERSION = 7;

export interface OutputCheck {
  name: string;
  maxAbs: number;
  maxRel: number;
  rms: number;
  cosine: number;
  passed: boolean;
  /** 'compared'; 'empty' (no elements on any probe: nothing compared, the check is skipped); or why it failed. */
  status: OutputStatus;
  /** Elements compared on a probe (the largest over probes); 0 means nothing was compared at this output. */
  count: number;
  /** Why the output failed when it was not a metric (missing, shape differs), or why it was not compared. */
  problem?: string;
  /**
   * false: bit-identical on every probe although a rewritten node upstream ran (e.g. a saturated sigmoid), so
   * the change was not observable at this output; true: it was; absent: no rewritten node upstream ran.
   */
  observable?: boolean;
  /** How |folded - original| is spread over the elements of every probe (the values the metrics judge). */
  histogram?: DiffHistogram;
  /** The bounds this output's gate puts on maxAbs or maxRel, evaluated on its metrics. */
  limits?: GateLimit[];
}

/**
 * The run itself (only with --run-figures, since it differs from run to run): wall time of the job and the
 * peak resident memory of the pleat process up to its end (in a batch, shared with the models running beside it).
 */
export interface RunFigures {
  seconds: number;
  peakMemoryBytes: number;
}

/** The whole-model comparison fold runs after folding (original float64 vs folded). */
export interface CheckSummary {
  /** 'passed' only when at least one probe compared at least one element of every output. */
  status: CheckStatus;
  /** status === 'passed'. */
  passed: boolean;
  /** Why nothing (or not every output) was compared: a reason code and one line; null unless skipped. */
  skipped: SkipInfo | null;
  /** --strict was on: a skipped check then fails the fold (exit 1, nothing written). */
  strict: boolean;
  probes: number;
  /** The arithmetic both models ran in (float64: see CHECK_ARITHMETIC in jobs/fold.ts); absent when skipped. */
  arithmetic?: 'float32' | 'float64';
  seed: number;
  /** The gate expression used for each output (default per data type unless --gate). */
  gates: string[];
  /** Symbolic dims no --dim, --shape or input set: the probes took each as 1. */
  assumedDims: AssumedDim[];
  /** Which rewritten nodes (layers the folds or equalization changed, nodes the folds created) the probes executed. */
  coverage: Coverage;
  outputs: OutputCheck[];
}

/** Half-precision storage (--store float16): what the storage rewrite reports (src/ship/store-float16.ts). */
export interface StorageSummary extends Float16Result {
  store: 'float16';
}

export interface FoldReport {
  schemaVersion: number;
  command: 'fold';
  model: string;
  /** The file written, or null when nothing was written (check failed). */
  output: string | null;
  normalizations: LedgerEntry[];
  nodesBefore: number;
  nodesAfter: number;
  bytesBefore: number;
  bytesAfter: number;
  check: CheckSummary | null;
  quantization: QuantRow[];
  /** --quant-threshold: a folded layer is flagged when a channel's per-tensor 8-bit SQNR falls below this (dB). */
  quantThresholdDb: number;
  /** --equalize: each pair of layers found, equalized or refused (empty without --equalize). */
  equalized: EqualizedPair[];
  /** --simulate-int8 weights: the output error of 8-bit weights, for the original and for the folded model. */
  int8: Int8Simulation | null;
  storage: StorageSummary | null;
  /** Where --save-probes wrote the probes (ONNX backend test-data layout), or null. */
  probesSaved: { dir: string; sets: number } | null;
  /** True when a gate failed, or --strict met a skipped check (exit 1): then nothing was written. */
  failed: boolean;
  /**
   * The side file (OUT.data) of the model this run replaces at OUT, when the new model keeps every weight inline:
   * left as it was, and read by nothing (set only then).
   */
  staleSideFile?: string;
  /** SHA-256 of the model file (hex), recorded when an HTML report is asked for (the page shows it). */
  sha256?: string;
  /** With sha256, for a model whose weights are in external data: its side files' digest (pleat.source.external.sha256). */
  externalSha256?: string;
  /** The neighbourhood of each normalization, recorded when an HTML report is asked for (the page draws it). */
  sketches?: Sketch[];
  run?: RunFigures;
}

export interface AuditReport {
  schemaVersion: number;
  command: 'audit';
  model: string;
  /** Normalizations and other constant affine steps (see Finding.kind). */
  normalizations: Finding[];
  /** Normalizations fold would fold, and those it keeps (affine steps are never kept). */
  foldable: number;
  kept: number;
  /** Other constant affine steps fold would fold too (listed apart, as "also foldable"). */
  alsoFoldable: number;
  failOn: 'kept' | null;
  /** True when --fail-on kept is set and a normalization is kept (exit 1). */
  failed: boolean;
  sha256?: string;
  externalSha256?: string;
  sketches?: Sketch[];
  run?: RunFigures;
}

/** How the names the user gave are checked against the model (see jobs/names.ts). */
export interface NameCheckOptions {
  /** Where --keep, --dim and --shape names came from (flags unless listed), for messages and hints. */
  origins?: NameOrigins;
  /** The caller checked the names across a whole batch already (a name must match in at least one model). */
  namesChecked?: boolean;
}

/** One output of an 8-bit weight simulation: each model with rounded weights against the original in float64. */
export interface Int8Output {
  name: string;
  /** The original model with its weights rounded, against itself unrounded: what 8 bits cost without the fold. */
  original: { maxAbs: number; maxRel: number; cosine: number } | null;
  /** The folded (and equalized) model with its weights rounded, against the unrounded original. */
  folded: { maxAbs: number; maxRel: number; cosine: number } | null;
  problem?: string;
}

export interface Int8Simulation {
  granularity: Int8Granularity;
  probes: number;
  outputs: Int8Output[];
}

export interface FoldJobOptions extends InputOptions, NameCheckOptions {
  keep?: string[];
  /** Give a norm its own copy of a producer whose output has other readers (--clone-shared). */
  cloneShared?: boolean;
  allowOverridable?: boolean;
  /** Store folded weights in half precision. */
  store?: 'float16';
  /** Gate for the whole-model check (default per output data type). */
  gate?: string;
  probes?: number;
  /** Skip the numeric proofs (not exposed on the CLI; for benchmarks of the rewrite alone). */
  noProofs?: boolean;
  /** Tensors of at least this many bytes go to a side file. */
  externalThreshold?: number;
  /** Threads for Conv, Gemm and MatMul in the proofs and the check (default: the available cores). */
  threads?: number;
  /** Flag folded layers whose worst channel's per-tensor 8-bit SQNR is below this (dB); default QUANT_THRESHOLD_DB. */
  quantThresholdDb?: number;
  /** Cross-layer equalization after folding (Nagel et al. 2019, section 4.1). */
  equalize?: boolean;
  /** Also report the output error of 8-bit weights (per tensor or per channel), before and after the fold. */
  simulateInt8?: Int8Granularity;
  /** A skipped whole-model check fails the fold (exit 1, nothing written). */
  strict?: boolean;
  /** Write the check's probes and the original model's outputs here, in the ONNX backend test-data layout. */
  saveProbes?: string;
  /** Record what an HTML report shows beyond the ledger: the model's SHA-256 and each norm's neighbourhood. */
  pageDetail?: boolean;
}

export interface AuditJobOptions extends NameCheckOptions {
  keep?: string[];
  /** Judge as fold --clone-shared would. */
  cloneShared?: boolean;
  dims?: InputOptions['dims'];
  shapes?: InputOptions['shapes'];
  allowOverridable?: boolean;
  failOn?: 'kept';
  /** See FoldJobOptions.pageDetail. */
  pageDetail?: boolean;
}
