// The export job: fold (with every proof and the whole-model check), then write the folded weights as a
// bundle for device runtimes. Nothing is written when a gate fails.
import { readModelFile } from '../onnx/read.js';
import { join } from 'node:path';
import { asGiven, planBundle, writeAll, type BundleFormat, type BundleResult } from '../ship/bundle.js';
import { sideFilePaths } from '../onnx/external.js';
import { OutputSet } from './outputs.js';
import { provenanceOf, setProvenance } from './provenance.js';
import { fileSha256 } from './sha256.js';
import { foldLoaded } from './fold.js';
import type { FoldJobOptions, FoldReport } from './types.js';

export interface ExportReport {
  fold: FoldReport;
  /** The bundle written, or null when the fold's check failed. */
  bundle: BundleResult | null;
}

export function exportFile(input: string, dir: string, format: BundleFormat = 'safetensors', opts: FoldJobOptions = {}): ExportReport {
  const model = readModelFile(input);
  const original = opts.noProofs ? undefined : readModelFile(input);
  const fold = foldLoaded(model, original, input, opts);
  if (fold.failed) return { fold, bundle: null };
  // what the folded .onnx would record (its source, the check's status, gate and seed) goes into the bundle too:
  // a bundle from a skipped check looked the same as one from a passed check
  setProvenance(model, provenanceOf(fileSha256(input), opts.gate, opts, fold.check?.status ?? 'not-run'));
  // Every bundle file goes through one transaction: staged, then all renamed in (see outputs.ts).
  const planned = planBundle(model, dir, format);
  const tx = new OutputSet();
  try {
    [model.sourcePath!, ...sideFilePaths(model)].forEach((p, i) => tx.protect(p, i === 0 ? 'input model' : "input model's side file"));
    const targets = planned.files.map(([name]) => tx.reserve(join(planned.result.dir, name), '--bundle'));
    planned.files.forEach(([, content], i) => tx.stage(targets[i]!, (tmp) => writeAll(tmp, content)));
    tx.commit();
  } catch (e) {
    tx.abort();
    throw e;
  }
  return { fold, bundle: asGiven(planned.result, dir) };
}
