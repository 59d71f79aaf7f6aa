import type { Argv } from 'yargs';
import { survey } from '../../src/jobs/survey.js';
import { surveyText } from '../../src/report/survey-text.js';
import { EXIT } from '../../src/report/exit-codes.js';
import { out } from '../errors.js';

export function builder(y: Argv) {
  return y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('json', { type: 'boolean', default: false, describe: 'print JSON for scripts' });
}

export async function handler(argv: { model: string; json: boolean }): Promise<void> {
  const report = survey(argv.model);
  await out(argv.json ? JSON.stringify(report, null, 2) + '\n' : surveyText(report));
  // the structure is shown, but a model whose weights are missing is bad input all the same
  const missing = report.missingData;
  if (missing.length) {
    const first = missing[0]!;
    process.stderr.write(`pleat: ${argv.model}: the data of ${missing.length} tensor${missing.length > 1 ? 's' : ''} cannot be read (tensor '${first.tensor}': ${first.problem})\n`);
    process.exitCode = EXIT.badInput;
  }
}
