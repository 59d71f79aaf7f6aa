import type { Argv } from 'yargs';
import { surveyFile } from '../../src/jobs/survey.js';
import { surveyText } from '../../src/report/survey-text.js';
import { EXIT } from '../../src/report/exit-codes.js';
import { out } from '../errors.js';

export function builder(y: Argv) {
  return y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('json', { type: 'boolean', default: false, describe: 'print JSON for scripts' });
}

export async function handler(argv: { model: string; json: boolean }): Promise<void> {
  const { report, readError } = surveyFile(argv.model);
  await out(argv.json ? JSON.stringify(report, null, 2) + '\n' : surveyText(report));
  // the structure is shown, but a model whose weights are missing is bad input all the same
  if (readError !== null) {
    // the reader's own line (it names the file, the tensor and what is wrong with its data)
    process.stderr.write(`pleat: ${readError}\n`);
    process.exitCode = EXIT.badInput;
  }
}
