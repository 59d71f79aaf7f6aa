#!/usr/bin/env node
// pleat's command line: parse flags, call the library, print. No logic lives here. Only the module of the
// command being run is imported (the table in commands/table.ts describes the others), so `pleat --help` and
// usage errors start fast.
import { createRequire } from 'node:module';
import type yargsType from 'yargs';
import { PleatError } from '../src/errors.js';
import { EXIT_CODES_TEXT } from '../src/report/exit-codes.js';
import { checkFlags, type OptionTable } from './check-flags.js';
import { COMMANDS, commandNames } from './commands/table.js';
import { listenForCancel } from './cancel.js';
import { guardStandardStreams, failAndExit, sayError } from './errors.js';
import { nearest } from './suggest.js';

// yargs 17 through its CommonJS build: about 35 ms to load here, against 65 ms for its ES module build (which
// also wraps help text mid-word) and 130 ms for yargs 18 (whose width measuring builds Unicode tables at load).
// Loaded in main, after the chosen command's early work has started (see CommandEntry.ahead).
const require = createRequire(import.meta.url);

/** Marks yargs' missing-positional message so the fail handler can name the command's own arguments. */
const MISSING_ARGUMENT = 'missing argument';
const TOP_FLAGS = new Set(['--help', '-h', '--version']);

/** `pleat help` is `pleat --help`; `pleat help fold` is `pleat fold --help`. */
function expandHelp(args: string[]): string[] {
  if (args[0] !== 'help') return args;
  if (args.length === 1) return ['--help'];
  return [args[1]!, '--help'];
}

/** A negative number, in any notation (-2, -2.5, -.5, -1e2, -2E-3). */
const NEGATIVE_NUMBER = /^-(\d+\.?\d*|\.\d+)(e[+-]?\d+)?$/i;

/**
 * `--quant-threshold -1e2` as `--quant-threshold=-1e2`: yargs reads a negative number in exponent notation after
 * an option as short flags (-1 -e -2), and the command failed naming none of them ("unexpected arguments 1, e").
 */
function joinNegativeValues(args: readonly string[]): string[] {
  const out: string[] = [];
  for (let i = 0; i < args.length; i++) {
    const a = args[i]!, next = args[i + 1];
    if (a.startsWith('--') && a.length > 2 && !a.includes('=') && next !== undefined && NEGATIVE_NUMBER.test(next)) {
      out.push(`${a}=${next}`);
      i++;
    } else {
      out.push(a);
    }
  }
  return out;
}

/**
 * After `--` every word is a file, even one that starts with a dash (`pleat survey -- -old.onnx`): such a word is
 * passed as `./-old.onnx`, the same file, which no option parser takes for an option. (yargs left the words after
 * `--` unassigned, and the command said its argument was missing.)
 */
function filesAfterDoubleDash(args: readonly string[]): string[] {
  const at = args.indexOf('--');
  if (at < 0) return [...args];
  return [...args.slice(0, at), ...args.slice(at + 1).map((a) => (a.startsWith('-') ? `./${a}` : a))];
}

/** Whether the command line asks for help (only then is the help text shown, so only then is it laid out). */
function wantsHelp(args: readonly string[]): boolean {
  return args.length === 0 || args.some((a) => a === '--help' || a === '-h' || a.startsWith('--help='));
}

/** The command named first, or a usage error naming the word and the nearest command. */
function commandOf(args: readonly string[]): (typeof COMMANDS)[number] | undefined {
  const first = args[0];
  if (first === undefined) return undefined;
  if (first.startsWith('-')) {
    if (TOP_FLAGS.has(first)) return undefined;
    throw new PleatError('usage', `unknown option ${first.split('=')[0]} before a command; name a command first (pleat <command> [options], see pleat --help)`);
  }
  const entry = COMMANDS.find((c) => c.name === first);
  if (entry) return entry;
  const guess = nearest(first, commandNames());
  throw new PleatError('usage', `'${first}' is not a pleat command${guess ? ` (did you mean '${guess}'?)` : ''}; commands: ${commandNames().join(', ')}, help`);
}

async function main(): Promise<void> {
  // (the argument parser asks for the working folder while it loads: gone, that was an internal error, exit 3)
  try { process.cwd(); } catch (e) {
    throw new PleatError('bad-input', `the working folder no longer exists (${(e as NodeJS.ErrnoException).code ?? String(e)}); run pleat from an existing folder`);
  }
  // the arguments after node and the script (what yargs' hideBin gives outside Electron; its module loads all
  // of yargs, which waits here until the command's early work has started)
  const args = joinNegativeValues(filesAfterDoubleDash(expandHelp(process.argv.slice(2))));
  const chosen = commandOf(args);
  await chosen?.ahead?.(args);
  const yargs = require('yargs') as typeof yargsType;
  const cli = yargs(args)
    .scriptName('pleat')
    .usage('pleat <command> [options]\n\nFold inference-mode normalization into neighbouring layers of ONNX models, prove the result, audit what stays.\n`pleat help <command>` (or `pleat <command> -h`) shows a command\'s options.');
  for (const c of COMMANDS) {
    if (c === chosen) {
      const mod = await c.load();
      cli.command(c.usage, c.describe, mod.builder as never, mod.handler as never);
    } else {
      cli.command(c.usage, c.describe);
    }
  }
  // yargs lays out the whole help text on every run of a command, to have it ready should the command fail; a
  // failing pleat command prints one line, never the help, so that work (tens of milliseconds) is skipped. The
  // hook is yargs' internal interface: when it is not there, the help is merely laid out as before.
  if (!wantsHelp(args)) {
    const usage = (cli as unknown as { getInternalMethods?(): { getUsageInstance?(): { cacheHelpMessage?: () => void } } })
      .getInternalMethods?.().getUsageInstance?.();
    if (usage?.cacheHelpMessage) usage.cacheHelpMessage = () => {};
  }
  await cli
    .middleware(((_argv: unknown, y: { getOptions(): OptionTable }) => {
      if (chosen) checkFlags(args.slice(1), y.getOptions());
    }) as never, true)
    .demandCommand(1, 'name a command (see pleat --help)')
    .strict()
    .help('help', 'print the options of pleat or of one command')
    .alias('h', 'help')
    .epilogue(EXIT_CODES_TEXT)
    .version('version', "print pleat's version", args.includes('--version') ? (await import('../src/jobs/version.js')).pleatVersion() : '')
    .updateStrings({
      'Not enough non-option arguments: got %s, need at least %s': {
        one: MISSING_ARGUMENT,
        other: MISSING_ARGUMENT,
      },
      'Missing required argument: %s': { one: 'missing required option --%s', other: 'missing required options --%s' },
      'Unknown argument: %s': { one: 'unexpected argument %s', other: 'unexpected arguments %s' },
    } as never)
    // Help is laid out to the terminal's width only when it is printed: yargs also renders it (and caches it)
    // on every run of a command, and wrapping it to a width took tens of milliseconds of each start-up.
    .wrap(wantsHelp(args) ? Math.min(110, process.stdout.columns || 110) : null)
    .fail((msg, err) => {
      if (err) failAndExit(err);
      const line = msg.startsWith(MISSING_ARGUMENT) && chosen ? `missing argument; usage: pleat ${chosen.usage} [options] (see pleat ${chosen.name} --help)` : msg.split('\n')[0];
      sayError(line!);
      process.exit(2);
    })
    .parseAsync();
}

// Ctrl-C or a TERM ends through process.exit (exit 130 or 143), so the output transaction's exit hook removes its
// temporaries; a batch's workers are stopped first (see cancel.ts).
listenForCancel();

guardStandardStreams();
main().catch(failAndExit);
