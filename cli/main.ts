#!/usr/bin/env node
// pleat's command line: parse flags, call the library, print. No logic lives here.
import yargs from 'yargs';
import { hideBin } from 'yargs/helpers';
import { failAndExit } from './errors.js';
import * as surveyCmd from './commands/survey.js';
import * as foldCmd from './commands/fold.js';
import * as auditCmd from './commands/audit.js';
import * as compareCmd from './commands/compare.js';
import * as evaluateCmd from './commands/evaluate.js';
import * as exportCmd from './commands/export.js';
import { EXIT_CODES_TEXT } from '../src/report/exit-codes.js';

async function main(): Promise<void> {
  const cli = yargs(hideBin(process.argv))
    .scriptName('pleat')
    .usage('pleat <command> [options]\n\nFold inference-mode normalization into neighbouring layers of ONNX models, prove the result, audit what stays.')
    .command(surveyCmd as never)
    .command(foldCmd as never)
    .command(auditCmd as never)
    .command(compareCmd as never)
    .command(evaluateCmd as never)
    .command(exportCmd as never)
    .demandCommand(1, 'name a command (see pleat --help)')
    .strict()
    .help()
    .epilogue(EXIT_CODES_TEXT)
    .version()
    .wrap(Math.min(110, process.stdout.columns || 110))
    .fail((msg, err) => {
      if (err) failAndExit(err);
      process.stderr.write(`pleat: ${msg.split('\n')[0]}\n`);
      process.exit(2);
    });
  await cli.parseAsync();
}

// Ctrl-C or a TERM ends through process.exit, so the output transaction's exit hook removes its temporaries.
for (const [sig, code] of [['SIGINT', 130], ['SIGTERM', 143]] as const) process.once(sig, () => process.exit(code));

main().catch(failAndExit);
