// The export job: fold (with every proof and the whole-model check), then write the folded weights as a
// bundle for device runtimes. Nothing is written when a gate fails.
import { readModelFile } from '../onnx/read.js';
import { exportBundle, type BundleFormat, type BundleResult } from '../ship/bundle.js';
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
  return { fold, bundle: exportBundle(model, dir, format) };
}
