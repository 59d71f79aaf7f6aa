// pleat's library API: everything the CLI does, callable from a Node script with the same JSON shapes.
import type { Model } from './graph/ir.js';
import type { CompareOptions, CompareReport } from './verify/compare.js';
import { compareFiles, loadChecked, type CompareJobOptions, type CompareJobReport } from './jobs/compare.js';
import { evaluate as evaluateModel, type EvaluateOptions, type EvaluateResult } from './verify/evaluate.js';
import { foldFile } from './jobs/fold.js';
import './jobs/with-checks.js'; // the library folds with proofs: load them (see jobs/check-kit.ts)
import { auditFile } from './jobs/audit.js';
import { type AuditJobOptions, type AuditReport, type FoldJobOptions, type FoldReport } from './jobs/types.js';
import { checkOptionValues } from './verify/option-values.js';

export { survey, surveyModel, type SurveyReport } from './jobs/survey.js';
export type { EvaluatorGap } from './eval/coverage.js';
export { PleatError, isPleatError, type ErrorKind } from './errors.js';
export { readModelFile, parseModel } from './onnx/read.js';
export { writeModelFile, serializeModel, type WriteOptions } from './onnx/write.js';
export { foldLoaded } from './jobs/fold.js';
export { exportFile, type ExportReport } from './jobs/export.js';
export { BUNDLE_FORMATS, type BundleFormat, type BundleResult } from './ship/bundle.js';
export { exportBundle } from './jobs/export.js';
export { auditLoaded } from './jobs/audit.js';
export { checkSaveTarget, saveOutputs, saveOutputsStaged } from './jobs/save-outputs.js';
export { loadInputFile, loadInputFiles, parseInputFlags } from './verify/inputs.js';
export { DEFAULT_GATES } from './verify/gate.js';
export { setThreads } from './eval/threads.js';
// the JSON text `--json` prints: a script that saves a result with it writes the same bytes (non-finite numbers as
// the strings "Infinity", "-Infinity", "NaN", as the schema says; JSON.stringify would write null)
export { toJsonText } from './report/json.js';
export type * from './jobs/types.js';
export type { Finding, LedgerEntry, FoldLedger, ReasonCode, Direction } from './fold/types.js';
export type { CompareOptions, CompareReport, CompareJobReport, EvaluateOptions, EvaluateResult, Model };

/** Fold every normalization that can be folded, prove it, and write `output` (unless a gate fails). */
export function fold(input: string, output: string, options: FoldJobOptions = {}): FoldReport {
  return foldFile(input, output, options);
}

/** Every normalization in the model, with its status, reason and hint; nothing is written. */
export function audit(input: string, options: AuditJobOptions = {}): AuditReport {
  return auditFile(input, options);
}

/**
 * Run two models on the same inputs and judge their agreement. With `saveProbes`, the probes and A's outputs are
 * written to that new or empty folder (ONNX backend test-data layout, see verify/probe-files.ts).
 */
export function compare(a: string | Model, b: string | Model, options: CompareJobOptions = {}): CompareJobReport {
  return compareFiles(a, b, options);
}

/** Run one model on given or seeded inputs. */
export function evaluate(model: string | Model, options: EvaluateOptions = {}): EvaluateResult {
  checkOptionValues(options);
  return evaluateModel(loadChecked(model), options);
}
