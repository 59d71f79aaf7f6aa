import type { Argv } from 'yargs';
import { survey } from '../../src/jobs/survey.js';
import { surveyText } from '../../src/report/survey-text.js';
import { out } from '../errors.js';


export function builder(y: Argv) {
  return y
    .positional('model', { type: 'string', demandOption: true, describe: 'the .onnx file' })
    .option('json', { type: 'boolean', default: false, describe: 'print JSON for scripts' });
}

export async function handler(argv: { model: string; json: boolean }): Promise<void> {
  const report = survey(argv.model);
  await out(argv.json ? JSON.stringify(report, null, 2) + '\n' : surveyText(report));
}
