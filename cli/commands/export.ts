import type { Argv } from 'yargs';
import { SCHEMA_VERSION } from '../../src/jobs/types.js';
import { useColour } from '../../src/report/format.js';
import { keepList, loadConfig, runSettings } from '../config.js';
import { out } from '../errors.js';
import { configFlags, EPILOGUE, inputFlags, many, threadsFlag } from '../flags.js';

export const command = 'export <model>';
export const describe = 'Fold and prove, then write the folded weights for device runtimes (safetensors + JSON manifest, or C source)';

export function builder(y: Argv) {
  return configFlags(inputFlags(y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('bundle', { type: 'string', demandOption: true, describe: 'folder for the bundle files' })
    .option('bundle-format', { type: 'string', choices: ['safetensors', 'c'], default: 'safetensors', describe: 'weights.safetensors, or weights.h + weights.c; both with manifest.json' })
    .option('keep', { type: 'string', coerce: many, describe: 'leave this normalization node in place; repeatable' })
    .option('gate', { type: 'string', describe: 'gate for the whole-model check' })
    .option('probes', { type: 'number', describe: 'number of seeded probes for the whole-model check (default 2)' })
    .option('json', { type: 'boolean', default: false, describe: 'print the report as JSON' })))
    .epilogue(EPILOGUE);
}

interface Flags {
  model: string; bundle: string; bundleFormat: 'safetensors' | 'c'; keep?: string[]; gate?: string; probes?: number; seed?: number;
  input?: string[]; shape?: string[]; dim?: string[]; json: boolean; config?: string; threads?: number;
}

export async function handler(argv: Flags): Promise<void> {
  const { config } = loadConfig(argv.config);
  const run = runSettings(config, argv);
  const threads = threadsFlag(argv.threads);
  // loaded here, not at start-up (see compare.ts)
  const { exportFile, setThreads } = await import('../../src/index.js');
  if (threads !== undefined) setThreads(threads);
  const { toJsonText } = await import('../../src/verify/compare.js');
  const { exportText } = await import('../../src/report/export-text.js');
  const { EXIT } = await import('../../src/report/exit-codes.js');
  const r = exportFile(argv.model, argv.bundle, argv.bundleFormat, {
    inputs: run.inputs, shapes: run.shapes, dims: run.dims, seed: run.seed, probes: run.probes, gate: run.gate, maxProbeMemory: run.maxProbeMemory, keep: keepList(config, argv.keep),
  });
  await out(argv.json
    ? toJsonText({ schemaVersion: SCHEMA_VERSION, command: 'export', model: argv.model, ...r })
    : exportText(r, useColour(process.stdout)));
  process.exitCode = r.bundle === null ? EXIT.failed : EXIT.ok;
}
