// The export job: fold (with every proof and the whole-model check), then write the folded weights as a
// bundle for device runtimes. Nothing is written when a gate fails.
import { readModelFile } from '../onnx/read.js';
import type { Model } from '../graph/ir.js';
import { join } from 'node:path';
import { asGiven, BUNDLE_FILES, checkBundleFolder, planBundle, writeAll, type BundleFormat, type BundleResult } from '../ship/bundle.js';
import { sideFilePaths } from '../onnx/external.js';
import { readBackBundle } from '../ship/read-back.js';
import { OutputSet } from './outputs.js';
import { externalSha256Later, provenanceOf, setProvenance } from './provenance.js';
import { sha256Later, type Later } from './sha256.js';
import { foldLoaded, withThreads } from './fold.js';
import { checkOptionValues } from '../verify/option-values.js';
import { SCHEMA_VERSION, type FoldJobOptions, type FoldReport } from './types.js';

/** What `pleat export --json` prints, and what exportFile returns. */
export interface ExportReport {
  schemaVersion: number;
  command: 'export';
  /** The input model, as given. */
  model: string;
  fold: FoldReport;
  /** The bundle written, or null when the fold's check failed. */
  bundle: BundleResult | null;
}

/** An export whose bundle is staged (written at temporary names), not yet renamed in. */
export interface StagedExport {
  report: ExportReport;
  /** Rename the bundle's files in (all or none); the report. */
  commit(): ExportReport;
  /** Remove the staged files instead. */
  abort(): void;
}

export function exportFile(input: string, dir: string, format: BundleFormat = 'safetensors', opts: FoldJobOptions = {}): ExportReport {
  return exportStaged(input, dir, format, opts).commit();
}

/**
 * Fold and prove INPUT and stage its bundle in DIR without renaming anything in: the caller commits (the CLI lets
 * a TERM or Ctrl-C that came during the work end the run first). A bundle folder not there yet is staged whole, at
 * a temporary name beside it, so a run that does not commit leaves no folder either.
 */
export function exportStaged(input: string, dir: string, format: BundleFormat = 'safetensors', opts: FoldJobOptions = {}): StagedExport {
  checkOptionValues(opts);
  // the bundle folder is checked before any work, like fold's -o: a bad destination found after a long fold and
  // check wasted them (and was never reported at all when the check failed)
  const folder = checkBundleFolder(dir, format);
  return withThreads(opts.threads, () => {
    const tx = new OutputSet();
    let digests: Array<Later<string> | undefined> = [];
    try {
      const model = readModelFile(input);
      const inputs = [model.sourcePath!, ...sideFilePaths(model)];
      inputs.forEach((p, i) => tx.protect(p, i === 0 ? 'input model' : "input model's side file"));
      // the source's digests (the side files' too, as fold records them) are worked out beside the fold
      const sha256 = sha256Later(input), external = inputs.length > 1 ? externalSha256Later(model) : undefined;
      digests = [sha256, external];
      if (folder.exists) for (const name of BUNDLE_FILES[format]) tx.reserve(join(folder.full, name), '--bundle');
      else tx.reserveFolder(folder.full, '--bundle');
      const original = opts.noProofs ? undefined : readModelFile(input);
      const fold = foldLoaded(model, original, input, opts);
      if (fold.failed) {
        for (const d of digests) d?.stop(); // (their threads: nothing is written)
        tx.abort();
        const report: ExportReport = { schemaVersion: SCHEMA_VERSION, command: 'export', model: input, fold, bundle: null };
        return { report, commit: () => report, abort: () => {} };
      }
      // what the folded .onnx would record (its source, the check's status, gate and seed) goes into the bundle too:
      // a bundle from a skipped check looked the same as one from a passed check
      setProvenance(model, provenanceOf(sha256(), opts.gate, opts, fold.check?.status ?? 'not-run', external?.()));
      const planned = planBundle(model, folder.full, format);
      // Every bundle file goes through one transaction: staged, then all renamed in (see outputs.ts).
      const staged = tx.stageFiles(folder.full, folder.exists, planned.files.map(([name, content]) => [name, (path: string) => writeAll(path, content)] as const), '--bundle');
      // what ships is what was checked: the staged files, read back from disk, against the checked model (a
      // mismatch throws BundleMismatch, an internal error: the catch below removes the staged files)
      const readBack = readBackBundle(model, format, staged);
      const report: ExportReport = { schemaVersion: SCHEMA_VERSION, command: 'export', model: input, fold, bundle: asGiven({ ...planned.result, readBack }, dir) };
      return { report, commit: () => { tx.commit(); return report; }, abort: () => tx.abort() };
    } catch (e) {
      for (const d of digests) d?.stop();
      tx.abort();
      throw e;
    }
  });
}

/**
 * Write a model's weights, as they are (no fold), into `dir` as `weights.safetensors` + `manifest.json` (format
 * 'safetensors') or `weights.h` + `weights.c` + `manifest.json` (format 'c'); same model and format, same bytes.
 * Through the output transaction, as every write of pleat's: the files staged, read back and compared with the
 * model, then renamed in together (a new folder whole), or nothing written; a killed process's temporaries are
 * named in intent records, for the next run writing there to clear.
 */
export function exportBundle(model: Model, dir: string, format: BundleFormat): BundleResult {
  const folder = checkBundleFolder(dir, format);
  const tx = new OutputSet();
  try {
    if (model.sourcePath) [model.sourcePath, ...sideFilePaths(model)].forEach((p, i) => tx.protect(p, i === 0 ? 'input model' : "input model's side file"));
    const planned = planBundle(model, folder.full, format);
    const staged = tx.stageFiles(folder.full, folder.exists, planned.files.map(([name, content]) => [name, (path: string) => writeAll(path, content)] as const), '--bundle');
    const readBack = readBackBundle(model, format, staged);
    tx.commit();
    return asGiven({ ...planned.result, readBack }, dir);
  } catch (e) {
    tx.abort();
    throw e;
  }
}
