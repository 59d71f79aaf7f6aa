import type { Argv } from 'yargs';
import { surveyFile } from '../../src/jobs/survey.js';
import { surveyText } from '../../src/report/survey-text.js';
import { EXIT } from '../../src/report/exit-codes.js';
import { out, sayError } from '../errors.js';
import { exitWhenWritten } from '../output.js';
import { prefetchSettled } from '../../src/onnx/prefetch.js';
import { PleatError } from '../../src/errors.js';

export function builder(y: Argv) {
  return y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('json', { type: 'boolean', default: false, describe: 'print JSON for scripts (same as --format json)' })
    .option('format', { type: 'string', choices: ['text', 'json'], describe: 'the report on stdout (default text)' });
}

export async function handler(argv: { model: string; json: boolean; format?: 'text' | 'json' }): Promise<void> {
  if (argv.json && argv.format === 'text') throw new PleatError('usage', '--json and --format text disagree; give one of them');
  const json = argv.json || argv.format === 'json';
  await prefetchSettled(); // (the model read ahead while the modules loaded, see the command table)
  const { report, readError } = surveyFile(argv.model);
  await out(json ? JSON.stringify(report, null, 2) + '\n' : surveyText(report));
  // the structure is shown, but a model whose weights are missing is bad input all the same
  if (readError !== null) {
    // the reader's own line (it names the file, the tensor and what is wrong with its data)
    sayError(readError);
    process.exitCode = EXIT.badInput;
  }
  await exitWhenWritten(); // (a natural exit first takes the read model's heap down: time the user only waits on)
}
