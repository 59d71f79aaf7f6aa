// `evaluate`: run one model on given or seeded inputs, and save its outputs as .npy files with an index.
import type { Model } from '../graph/ir.js';
import type { Precision, Value } from '../eval/value.js';
import { runModel } from '../eval/run.js';
import { withProbeMemory } from '../eval/budget.js';
import { checkProbeEstimate } from './probe-budget.js';
import { PleatError } from '../errors.js';
import { isFloatType } from '../graph/tensor.js';
import { DataType } from '../graph/ir.js';
import { npyBytes } from './npy.js';
import { EXACT_INTEGER_LIMIT, wideOutputValue } from './wide-integers.js';
import { asMap, checkDimFlags, makeProbe, resolveInputs, summarizeInputs, type InputOptions, type InputSummary } from './inputs.js';

export interface EvaluateOptions extends InputOptions {
  /** Arithmetic of the run: 'float64' (ground truth, the default) or 'float32' (deployment arithmetic). */
  precision?: Precision;
}

export interface EvaluateResult {
  precision: Precision;
  seed: number;
  /** What each input was and where it came from. */
  inputSummary: InputSummary[];
  /** The input values the model ran on, by name. */
  inputs: Map<string, Value>;
  /** Graph outputs in graph order. */
  outputs: Map<string, Value>;
}

/** Run a model once on the given inputs, generating seeded values for the rest. */
export function evaluate(model: Model, opts: EvaluateOptions = {}): EvaluateResult {
  return withProbeMemory(opts.maxProbeMemory, () => evaluateWithin(model, opts));
}

function evaluateWithin(model: Model, opts: EvaluateOptions): EvaluateResult {
  const precision = opts.precision ?? 'float64';
  const seed = opts.seed ?? 0;
  const dims = asMap(opts.dims);
  checkDimFlags(dims, [model.graph]);
  const specs = resolveInputs(model.graph, asMap(opts.inputs), asMap(opts.shapes), dims);
  checkProbeEstimate(model.graph, specs);
  const inputs = makeProbe(specs, seed, 0);
  const outputs = runModel(model, inputs, { precision });
  for (const [name, v] of outputs) {
    const wide = wideOutputValue(v.type, v.data);
    if (wide) {
      throw new PleatError('dtype-unsupported', `output '${name}' holds ${wide.text} (element ${wide.index}), at or beyond 2^53 = ${EXACT_INTEGER_LIMIT}: pleat's evaluator holds integers in float64, which may have rounded it; nothing saved`);
    }
  }
  return { precision, seed, inputSummary: summarizeInputs(specs), inputs, outputs };
}

/** The index file saving outputs writes beside them. */
const INDEX_FILE = 'outputs.json';

/**
 * File names for output names: keep [A-Za-z0-9._-], replace anything else with '_', never start with '.', and
 * make names unique ignoring case (so they survive case-insensitive file systems) by adding -2, -3, ... in
 * output order.
 */
export function safeFileNames(names: readonly string[], ext = '.npy'): string[] {
  const used = new Set<string>([INDEX_FILE]);
  return names.map((name) => {
    let base = name.replace(/[^A-Za-z0-9._-]/g, '_').replace(/^\./, '_');
    if (base === '') base = 'output';
    let file = base + ext;
    for (let k = 2; used.has(file.toLowerCase()); k++) file = `${base}-${k}${ext}`;
    used.add(file.toLowerCase());
    return file;
  });
}

export interface SaveOptions {
  /** Write floating-point outputs as float64 instead of their model type (keeps a float64 run's full precision). */
  float64?: boolean;
  /** Files the run read, as [path, what] (its --input files): no saved output may replace one. */
  reads?: ReadonlyArray<readonly [string, string]>;
}

export interface SavedOutputs {
  dir: string;
  /** Output name and the file (relative to dir) holding it, in output order. */
  files: Array<{ name: string; file: string }>;
}

/** The names of the files saving outputs named `names` writes, in the order written (the index last). */
export function savedFileNames(names: readonly string[]): string[] {
  return [...safeFileNames(names), INDEX_FILE];
}

/**
 * What saving OUTPUTS writes, decided before anything is written: DIR/<safe name>.npy for each output and
 * outputs.json mapping output name -> file, the index last (src/jobs/save-outputs.ts writes them through the
 * output transaction).
 */
export function outputFiles(outputs: ReadonlyMap<string, Value>, opts: SaveOptions = {}): { files: SavedOutputs['files']; contents: Array<[string, Uint8Array | string]> } {
  const names = [...outputs.keys()];
  const written = savedFileNames(names);
  const files = written.slice(0, -1);
  const index: Record<string, string> = {};
  names.forEach((n, i) => { index[n] = files[i]!; });
  const contents: Array<[string, Uint8Array | string]> = names.map((name, i) => {
    const v = outputs.get(name)!;
    return [files[i]!, npyBytes(opts.float64 && isFloatType(v.type) ? { ...v, type: DataType.DOUBLE } : v)];
  });
  contents.push([written[written.length - 1]!, JSON.stringify(index, null, 2) + '\n']);
  return { files: names.map((name, i) => ({ name, file: files[i]! })), contents };
}
