import type { Argv } from 'yargs';
import { filesRead, keepList, loadConfig, nameOrigins } from '../config.js';
import type { Job } from '../batch.js';
import { checkDestinations, exitWhenWritten, planReports, runAndReport } from '../output.js';
import { configFlags, EPILOGUE, many, reportFlags } from '../flags.js';
import { CHOICE_OPTIONS } from '../../src/verify/option-values.js';


export function builder(y: Argv) {
  return configFlags(reportFlags(y
    .positional('models', { type: 'string', array: true, demandOption: true, describe: 'the .onnx file(s)' })
    .option('fail-on', { type: 'string', choices: [...CHOICE_OPTIONS.failOn.values], describe: 'exit 1 when a normalization is kept (JUnit: a failure per kept one)' })
    .option('keep', { type: 'string', coerce: many, describe: 'treat this normalization node as kept by choice; repeatable' })
    .option('allow-overridable', { type: 'boolean', default: false, describe: 'judge as fold --allow-overridable would' })
    .option('clone-shared', { type: 'boolean', default: false, describe: 'judge as fold --clone-shared would' })
    .option('quiet', { type: 'boolean', default: false, describe: 'no progress bar' })))
    .epilogue(EPILOGUE);
}

interface Flags { models: string[]; failOn?: 'kept'; keep?: string[]; allowOverridable: boolean; cloneShared: boolean; json?: boolean; format?: string; report?: string[]; runFigures?: boolean; config?: string; quiet: boolean }

export async function handler(argv: Flags): Promise<void> {
  const plan = planReports(argv);
  const { config, file, path } = loadConfig(argv.config);
  const reads = filesRead(path);
  const opts = { keep: keepList(config, argv.keep), failOn: argv.failOn ?? config.failOn, allowOverridable: argv.allowOverridable, cloneShared: argv.cloneShared, origins: nameOrigins(config, file, argv), pageDetail: plan.pageDetail };
  const jobs: Job[] = argv.models.map((model) => ({ command: 'audit', model, opts, runFigures: plan.runFigures }));
  await checkDestinations(plan, { inputs: argv.models, reads });
  await runAndReport('audit', jobs, plan, argv.quiet, reads);
  await exitWhenWritten();
}
