import type { Argv } from 'yargs';
import { useColour } from '../../src/report/format.js';
import { keepList, loadConfig, nameOrigins, runSettings } from '../config.js';
import { out } from '../errors.js';
import { signalsFirst } from '../cancel.js';
import { outputsModule } from '../output.js';
import { configFlags, EPILOGUE, inputFlags, many, threadsFlag } from '../flags.js';
import { CHOICE_OPTIONS } from '../../src/verify/option-values.js';


export function builder(y: Argv) {
  return configFlags(inputFlags(y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('bundle', { type: 'string', demandOption: true, describe: 'folder for the bundle files' })
    .option('bundle-format', { type: 'string', choices: ['safetensors', 'c'], default: 'safetensors', describe: 'weights.safetensors, or weights.h + weights.c; both with manifest.json' })
    .option('keep', { type: 'string', coerce: many, describe: 'leave this normalization node in place; repeatable' })
    .option('store', { type: 'string', choices: [...CHOICE_OPTIONS.store.values], describe: 'store the folded weights in half precision in the bundle (the whole-model check uses the float16 gate)' })
    .option('gate', { type: 'string', describe: 'gate for the whole-model check' })
    .option('probes', { type: 'number', describe: 'number of seeded probes for the whole-model check (default 2)' })
    .option('strict', { type: 'boolean', describe: 'a skipped check fails: exit 1, and no bundle is written (also "strict": true in the config file)' })
    .option('json', { type: 'boolean', default: false, describe: 'print the report as JSON' })))
    .epilogue(EPILOGUE);
}

interface Flags {
  model: string; bundle: string; bundleFormat: 'safetensors' | 'c'; keep?: string[]; store?: 'float16'; gate?: string; probes?: number; seed?: number;
  input?: string[]; shape?: string[]; dim?: string[]; json: boolean; config?: string; threads?: number; strict?: boolean;
}

export async function handler(argv: Flags): Promise<void> {
  const { config, file } = loadConfig(argv.config);
  const run = runSettings(config, argv);
  const threads = threadsFlag(argv.threads);
  // loaded here, not at start-up (see compare.ts)
  await outputsModule(); // (its notices as warning lines)
  const { setThreads } = await import('../../src/index.js'); // (which also loads the fold's proofs and checks)
  const { exportStaged } = await import('../../src/jobs/export.js');
  if (threads !== undefined) setThreads(threads);
  const { toJsonText } = await import('../../src/report/json.js');
  const { exportText } = await import('../../src/report/export-text.js');
  const { EXIT } = await import('../../src/report/exit-codes.js');
  const staged = exportStaged(argv.model, argv.bundle, argv.bundleFormat, {
    inputs: run.inputs, shapes: run.shapes, dims: run.dims, seed: run.seed, probes: run.probes, gate: run.gate, maxProbeMemory: run.maxProbeMemory, keep: keepList(config, argv.keep),
    store: argv.store ?? config.store, strict: run.strict, origins: nameOrigins(config, file, argv),
  });
  await signalsFirst(); // a TERM or Ctrl-C during the work ends the run here: nothing renamed in
  const r = staged.commit();
  await out(argv.json ? toJsonText(r) : exportText(r, useColour(process.stdout)));
  process.exitCode = r.bundle === null ? EXIT.failed : EXIT.ok;
}
