import type { Argv } from 'yargs';
import { mkdirSync } from 'node:fs';
import { basename, dirname, join, sep } from 'node:path';
import { PleatError } from '../../src/errors.js';
import type { FoldJobOptions } from '../../src/jobs/types.js';
import { startSha256, stopSha256Ahead } from '../../src/jobs/sha256.js';
import { filesRead, keepList, loadConfig, nameOrigins, runSettings } from '../config.js';
import type { Job } from '../batch.js';
import { checkDestinations, exitWhenWritten, planReports, removeAtExitIfEmpty, runAndReport } from '../output.js';
import { checkFlags, configFlags, EPILOGUE, inputFlags, int8Flags, int8Setting, many, reportFlags, threadsFlag } from '../flags.js';
import { CHOICE_OPTIONS } from '../../src/verify/option-values.js';


export function builder(y: Argv) {
  return configFlags(checkFlags(int8Flags(reportFlags(inputFlags(y
    .positional('models', { type: 'string', array: true, demandOption: true, describe: 'the .onnx file(s)' })
    .option('out', { alias: 'o', type: 'string', describe: 'the folded model to write (one input model)' })
    .option('out-dir', { type: 'string', describe: 'folder for the folded models, same file names (several input models)' })
    .option('keep', { type: 'string', coerce: many, describe: 'leave this normalization node in place; repeatable' })
    .option('allow-overridable', { type: 'boolean', default: false, describe: 'also fold weights and norm parameters that are graph inputs with defaults (callers could replace them)' })
    .option('clone-shared', { type: 'boolean', default: false, describe: 'fold a norm into a layer whose output has other readers by giving the norm its own copy of the layer (costs weight bytes, shown in the ledger)' })
    .option('store', { type: 'string', choices: [...CHOICE_OPTIONS.store.values], describe: 'store folded weights in half precision' })
    .option('external-data-min', { type: 'number', describe: 'store tensors of at least this many bytes in a side file OUT.data (ONNX external data)' })
    .option('gate', { type: 'string', describe: 'gate for the whole-model check, e.g. "maxAbs < 1e-4 and cosine > 0.99999"' })
    .option('probes', { type: 'number', describe: 'number of seeded probes for the whole-model check (default 2)' })
    .option('unproven', { type: 'boolean', default: false, describe: 'skip the per-fold proofs and the whole-model check (for models too large to check in memory); check the result with pleat compare before shipping it' })
    .option('equalize', { type: 'boolean', default: false, describe: 'after folding, balance the channel ranges of layer pairs joined only by Relu-like steps (cross-layer equalization), proven like a fold' })
    .option('quant-threshold', { type: 'number', describe: 'flag a folded layer when a channel keeps less than this SQNR (dB) under one per-tensor 8-bit scale (default 20)' })
    .option('quiet', { type: 'boolean', default: false, describe: 'no progress bar' }))))))
    .epilogue(EPILOGUE);
}

interface Flags {
  models: string[]; out?: string; outDir?: string; keep?: string[]; allowOverridable: boolean; cloneShared: boolean; externalDataMin?: number; store?: 'float16'; gate?: string; probes?: number; seed?: number; unproven: boolean; threads?: number;
  equalize: boolean; quantThreshold?: number; simulateInt8?: string; int8Granularity?: string;
  input?: string[]; shape?: string[]; dim?: string[]; json?: boolean; format?: string; report?: string[]; runFigures?: boolean; config?: string; quiet: boolean;
  strict?: boolean; saveProbes?: string;
}

/**
 * Where each model's folded copy goes: -o for one model, --out-dir for any number; with the highest folder made
 * for --out-dir, when any was.
 */
function outputsFor(models: string[], out: string | undefined, outDir: string | undefined): { paths: string[]; made?: string } {
  if (out !== undefined && outDir !== undefined) throw new PleatError('usage', 'give either -o/--out or --out-dir, not both');
  if (out !== undefined) {
    if (models.length > 1) throw new PleatError('usage', `-o names one output but ${models.length} models were given; use --out-dir DIR`);
    return { paths: [out] };
  }
  if (outDir === undefined) throw new PleatError('usage', 'fold needs -o OUT (one model) or --out-dir DIR (any number of models)');
  const names = models.map((m) => basename(m));
  // (the output is named after the model: a path with no file name in it names nothing to write)
  const nameless = models.find((_, i) => names[i] === '');
  if (nameless !== undefined) throw new PleatError('bad-input', `'${nameless}'${nameless === '' ? ' (an empty path)' : ''}: no model file named; give the model's path`);
  const twin = names.findIndex((n, i) => names.indexOf(n) !== i);
  if (twin >= 0) {
    throw new PleatError('usage', `${models[names.indexOf(names[twin]!)]} and ${models[twin]} are both named '${names[twin]}', so --out-dir would write them to one file; fold them separately`);
  }
  let made: string | undefined;
  try {
    made = mkdirSync(outDir, { recursive: true });
  } catch (e) {
    throw new PleatError('bad-input', `--out-dir ${outDir}: cannot create the folder (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  // paths as given: the folder the user typed, then the file name (join would rewrite ./out/ as out)
  return { paths: names.map((n) => (outDir.endsWith('/') || outDir.endsWith(sep) ? `${outDir}${n}` : `${outDir}/${n}`)), made };
}

function quantThreshold(db: number | undefined): number | undefined {
  if (db !== undefined && !Number.isFinite(db)) throw new PleatError('usage', `--quant-threshold ${db}: give a number of decibels, e.g. 20`);
  return db;
}

export async function handler(argv: Flags): Promise<void> {
  const plan = planReports(argv);
  const { config, file, path } = loadConfig(argv.config);
  const run = runSettings(config, argv);
  const reads = filesRead(path, run.inputs);
  const { paths: outputs, made } = outputsFor(argv.models, argv.out, argv.outDir);
  // (the folders must be there for the outputs to be claimed in them; a run that writes nothing there takes them away)
  if (made !== undefined) await removeAtExitIfEmpty(made, argv.outDir!);
  const opts: FoldJobOptions = {
    inputs: run.inputs, shapes: run.shapes, dims: run.dims, seed: run.seed, probes: run.probes, gate: run.gate, maxProbeMemory: run.maxProbeMemory,
    keep: keepList(config, argv.keep), store: argv.store ?? config.store, allowOverridable: argv.allowOverridable,
    cloneShared: argv.cloneShared, externalThreshold: argv.externalDataMin, noProofs: argv.unproven, threads: threadsFlag(argv.threads), pageDetail: plan.pageDetail,
    strict: run.strict, saveProbes: argv.saveProbes, origins: nameOrigins(config, file, argv),
    equalize: argv.equalize, quantThresholdDb: quantThreshold(argv.quantThreshold), simulateInt8: int8Setting(argv),
  };
  if (argv.saveProbes !== undefined && argv.models.length > 1) throw new PleatError('usage', `--save-probes names one folder but ${argv.models.length} models were given; fold them one at a time`);
  // One model is folded in this process: its input's digest (recorded in the output) is worked out on a thread
  // beside the loading of the fold's modules and the reading, started now unless main.ts started it already (see
  // the table's `ahead`). A batch's jobs hash their inputs on their workers: nothing started here is needed.
  if (argv.models.length === 1) startSha256(argv.models[0]!);
  else stopSha256Ahead();
  const sides = outputs.map((o) => join(dirname(o), `${basename(o)}.data`));
  await checkDestinations(plan, {
    inputs: argv.models,
    reads,
    outputs: [...outputs.map((o) => [o, argv.out !== undefined ? '-o' : '--out-dir'] as const), ...sides.map((s) => [s, 'side file'] as const)],
  });
  const jobs: Job[] = argv.models.map((model, i) => ({ command: 'fold', model, output: outputs[i]!, opts, runFigures: plan.runFigures }));
  await runAndReport('fold', jobs, plan, argv.quiet, reads);
  await exitWhenWritten(); // (every file is renamed in and the report printed: nothing is left for the exit to wait on)
}
