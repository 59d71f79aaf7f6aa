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
import { fileSha256 } from './sha256.js';
import { externalSha256Later } from './provenance.js';
import { checkNames, modelNames, type NameOrigins } from './names.js';
import { asMap } from '../verify/inputs.js';

/** What compare() returns and `pleat compare --json` prints: the comparison, with the schema version, the command and the two models. */
export type CompareJobReport = { schemaVersion: number; command: 'compare'; a: string; b: string } & CompareReport;

/**
 * `digests`: also work out each model's SHA-256, and its side files' digest when it has external data (the HTML page
 * shows them). `origins`: which dim and shape names came from a config file (messages then name the file, not a flag).
 */
export type CompareJobOptions = CompareOptions & { saveProbes?: string; digests?: boolean; origins?: NameOrigins };

/**
 * Which files were compared: each model file's SHA-256, and for a model whose weights are in external data its side
 * files' digest, worked out as pleat.source.external.sha256 records it (a weight on a side file is part of the model
 * compared; the .onnx digest alone would name two models with different weights alike).
 */
export interface CompareDigests {
  sha256: { a: string; b: string };
  externalSha256?: { a?: string; b?: string };
}

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
export function compareStaged(a: string | Model, b: string | Model, options: CompareJobOptions = {}): { report: CompareJobReport; staged: StagedFile[]; digests?: CompareDigests } {
  const tx = new OutputSet();
  try {
    const found: { digests?: CompareDigests } = {};
    const report = compareIn(tx, a, b, options, found);
    return { report, staged: tx.handOver(), ...found };
  } catch (e) {
    tx.abort();
    throw e;
  }
}

/** A model's file digest (undefined for a model in memory with no file), and its side files' digest if it has any. */
function digestsOf(m: string | Model, model: Model): { sha256?: string; external?: string } {
  const file = typeof m === 'string' ? m : model.sourcePath;
  return { sha256: file === undefined ? undefined : fileSha256(file), external: externalSha256Later(model)?.() };
}

function compareIn(tx: OutputSet, a: string | Model, b: string | Model, options: CompareJobOptions, found: { digests?: CompareDigests } = {}): CompareJobReport {
  checkOptionValues(options);
  const named = (r: CompareReport): CompareJobReport => ({ schemaVersion: SCHEMA_VERSION, command: 'compare', a: nameOf(a), b: nameOf(b), ...r });
  const { saveProbes, digests, origins, ...opts } = options;
  const ma = loadChecked(a), mb = loadChecked(b);
  // a dim or shape name matching no input of either model, named as the user gave it (flag or config file)
  const dims = [...asMap(opts.dims).keys()], shapes = [...asMap(opts.shapes).keys()];
  if (dims.length || shapes.length) checkNames([modelNames(ma, nameOf(a), false), modelNames(mb, nameOf(b), false)], { dims, shapes, origins });
  if (digests) {
    const da = digestsOf(a, ma), db = digestsOf(b, mb);
    if (da.sha256 !== undefined && db.sha256 !== undefined) {
      found.digests = { sha256: { a: da.sha256, b: db.sha256 } };
      if (da.external !== undefined || db.external !== undefined) {
        found.digests.externalSha256 = { ...(da.external !== undefined ? { a: da.external } : {}), ...(db.external !== undefined ? { b: db.external } : {}) };
      }
    }
  }
  if (saveProbes === undefined) return named(compareModels(ma, mb, opts));
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
