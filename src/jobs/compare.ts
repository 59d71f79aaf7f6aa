// The compare job: run two models on the same inputs and judge their agreement; with `saveProbes`, the probes and
// A's outputs are written to that new or empty folder (ONNX backend test-data layout, see verify/probe-files.ts)
// through the output transaction.
import type { Model } from '../graph/ir.js';
import { readModelFile } from '../onnx/read.js';
import { sideFilePaths } from '../onnx/external.js';
import { checkOpset } from '../graph/opsets.js';
import { compare as compareModels, type CompareOptions, type CompareReport, type ProbeRecord } from '../verify/compare.js';
import { saveProbeSets } from '../verify/probe-files.js';
import { checkOptionValues } from '../verify/option-values.js';
import { OutputSet, type StagedFile } from './outputs.js';
import { SCHEMA_VERSION } from './types.js';

/** What compare() returns and `pleat compare --json` prints: the comparison, with the schema version, the command and the two models. */
export type CompareJobReport = { schemaVersion: number; command: 'compare'; a: string; b: string } & CompareReport;

export type CompareJobOptions = CompareOptions & { saveProbes?: string };

/** How a report names a model: the path as given, or a Model's source file ('(model in memory)' when it has none). */
const nameOf = (m: string | Model): string => (typeof m === 'string' ? m : m.sourcePath ?? '(model in memory)');

/** A model read from its file (or given), its opsets checked. */
export function loadChecked(m: string | Model): Model {
  const model = typeof m === 'string' ? readModelFile(m) : m;
  checkOpset(model, typeof m === 'string' ? m : 'model');
  return model;
}

/** Compare A and B; the probe folder (with `saveProbes`) is renamed in before this returns. */
export function compareFiles(a: string | Model, b: string | Model, options: CompareJobOptions = {}): CompareJobReport {
  const tx = new OutputSet();
  try {
    const report = compareIn(tx, a, b, options);
    tx.commit();
    return report;
  } catch (e) {
    tx.abort();
    throw e;
  }
}

/**
 * Compare A and B, and stage the probe folder (with `saveProbes`) without renaming it in: the caller adopts the
 * staged files into its own transaction and commits them with its reports (the CLI, after letting a TERM or
 * Ctrl-C that came during the work end the run).
 */
export function compareStaged(a: string | Model, b: string | Model, options: CompareJobOptions = {}): { report: CompareJobReport; staged: StagedFile[] } {
  const tx = new OutputSet();
  try {
    const report = compareIn(tx, a, b, options);
    return { report, staged: tx.handOver() };
  } catch (e) {
    tx.abort();
    throw e;
  }
}

function compareIn(tx: OutputSet, a: string | Model, b: string | Model, options: CompareJobOptions): CompareJobReport {
  checkOptionValues(options);
  const named = (r: CompareReport): CompareJobReport => ({ schemaVersion: SCHEMA_VERSION, command: 'compare', a: nameOf(a), b: nameOf(b), ...r });
  const { saveProbes, ...opts } = options;
  if (saveProbes === undefined) return named(compareModels(loadChecked(a), loadChecked(b), opts));
  const ma = loadChecked(a), mb = loadChecked(b);
  // the probe folder goes through the output transaction: checked first, written beside, renamed in whole
  for (const m of [ma, mb]) if (m.sourcePath) [m.sourcePath, ...sideFilePaths(m)].forEach((p) => tx.protect(p, 'input model'));
  tx.reserveFolder(saveProbes, '--save-probes');
  const records: ProbeRecord[] = [];
  const report = compareModels(ma, mb, { ...opts, onProbe: (p) => records.push(p) });
  let sets = 0;
  tx.stageFolder(saveProbes, (tmp) => { sets = saveProbeSets(tmp, ma.graph, records); });
  report.probesSaved = { dir: saveProbes, sets };
  return named(report);
}
