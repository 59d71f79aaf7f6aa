import type { Argv } from 'yargs';
import { sep } from 'node:path';
import { SCHEMA_VERSION } from '../../src/jobs/types.js';
import { filesRead, loadConfig, nameOrigins, runSettings } from '../config.js';
import { out } from '../errors.js';
import { signalsFirst } from '../cancel.js';
import { outputsModule } from '../output.js';
import { configFlags, EPILOGUE, inputFlags, threadsFlag } from '../flags.js';
import { CHOICE_OPTIONS } from '../../src/verify/option-values.js';


export function builder(y: Argv) {
  return configFlags(inputFlags(y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('precision', { type: 'string', choices: [...CHOICE_OPTIONS.precision.values], default: 'float64', describe: 'arithmetic: float64 (ground truth) or float32 (deployment)' })
    .option('save', { type: 'string', demandOption: true, describe: 'folder for the .npy outputs and outputs.json' })
    .option('json', { type: 'boolean', default: false, describe: 'print what was saved as JSON' })))
    .epilogue(EPILOGUE);
}

interface Flags { model: string; precision: 'float64' | 'float32'; threads?: number; save: string; json: boolean; seed?: number; input?: string[]; shape?: string[]; dim?: string[]; config?: string }

export async function handler(argv: Flags): Promise<void> {
  const { config, file, path } = loadConfig(argv.config);
  const run = runSettings(config, argv);
  const threads = threadsFlag(argv.threads);
  // loaded here, not at start-up (see compare.ts)
  await outputsModule(); // (its notices as warning lines)
  const { checkSaveTarget, evaluate, saveOutputsStaged, setThreads } = await import('../../src/index.js');
  const { readModelFile } = await import('../../src/onnx/read.js');
  const { dataTypeName } = await import('../../src/graph/tensor.js');
  if (threads !== undefined) setThreads(threads);
  const { toJsonText } = await import('../../src/report/json.js');
  const reads = filesRead(path, run.inputs);
  // the outputs' files are checked before the work, once the model says what they are called
  const model = readModelFile(argv.model);
  const { checkJobNames } = await import('../../src/jobs/names.js');
  checkJobNames(model, argv.model, { dims: run.dims, shapes: run.shapes, origins: nameOrigins(config, file, argv) });
  checkSaveTarget(argv.save, model.graph.outputs.map((o) => o.name), { reads });
  const r = evaluate(model, { inputs: run.inputs, shapes: run.shapes, dims: run.dims, seed: run.seed, precision: argv.precision, maxProbeMemory: run.maxProbeMemory });
  const staged = saveOutputsStaged(argv.save, r.outputs, { reads });
  await signalsFirst(); // a TERM or Ctrl-C during the work ends the run here: nothing renamed in
  const saved = staged.commit();
  const outputs = saved.files.map((f) => ({ ...f, dtype: dataTypeName(r.outputs.get(f.name)!.type), dims: [...r.outputs.get(f.name)!.dims] }));
  if (argv.json) {
    await out(toJsonText({ schemaVersion: SCHEMA_VERSION, command: 'evaluate', model: argv.model, precision: r.precision, seed: r.seed, inputs: r.inputSummary, dir: argv.save, outputs }));
    return;
  }
  const lines = [`evaluate ${argv.model} (${r.precision}, seed ${r.seed}) -> ${argv.save}`];
  for (const i of r.inputSummary) lines.push(`  input  ${i.name} [${i.dims.join('x')}] ${i.source === 'file' ? `from ${i.file}` : 'seeded probe'}`);
  // paths as given: the folder the user typed, then the file name
  const under = (name: string) => (argv.save.endsWith('/') || argv.save.endsWith(sep) ? `${argv.save}${name}` : `${argv.save}/${name}`);
  for (const o of outputs) lines.push(`  output ${o.name} [${o.dims.join('x')}] -> ${under(o.file)}`);
  lines.push(`  index  ${under('outputs.json')}`);
  await out(lines.join('\n') + '\n');
}
