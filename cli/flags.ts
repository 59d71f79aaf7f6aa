// Flag definitions shared by several commands, spelled as shared/VOCABULARY.md lists them.
import type { Argv } from 'yargs';
import { PleatError } from '../src/errors.js';

/**
 * A repeatable flag taking one value each time (--keep a --keep b). Not yargs' `array`, which would swallow the
 * model paths that follow the first value.
 */
export const many = (v: unknown): string[] => (v === undefined ? [] : (Array.isArray(v) ? v : [v]).map(String));
import { EXIT_CODES_TEXT } from '../src/report/exit-codes.js';
import { FORMATS } from '../src/report/format.js';
import { CHOICE_OPTIONS, NUMBER_OPTIONS, numberFits, type NumberRule } from '../src/verify/option-values.js';

/** Options that may be given more than once (each adds one value); every other value option takes one value. */
export const REPEATABLE: ReadonlySet<string> = new Set(['input', 'shape', 'dim', 'keep', 'report']);

/**
 * Number flags, by flag name, from the library's table (src/verify/option-values.ts): whole numbers from `min` to `max`
 * unless `real` (flags not listed: whole, 0 or more). A probe count or seed past its bound is refused here,
 * before any work (it was an internal error, or a seed silently taken modulo 2^32).
 */
export const NUMBER_RULES: Record<string, NumberRule> = Object.fromEntries(
  Object.values(NUMBER_OPTIONS as Record<string, NumberRule>).filter((r) => r.flag !== undefined).map((r) => [r.flag!, r]),
);

export function inputFlags<T>(y: Argv<T>) {
  return y
    .option('input', { type: 'string', coerce: many, describe: 'NAME=FILE.npy (or .pb TensorProto): a value for an input; repeatable' })
    .option('shape', { type: 'string', coerce: many, describe: 'NAME=1x3x224x224 (or 1,3,224,224): the shape of an input; repeatable' })
    .option('dim', { type: 'string', coerce: many, describe: 'SYMBOL=N: the size of a dynamic dim; repeatable' })
    .option('seed', { type: 'number', describe: 'seed of the generated probe values (default 0)' })
    .option('max-probe-memory', { type: 'string', describe: 'BYTES (or with K, M, G): most memory the values of a probe run may hold at once (default: 1/16 of the machine memory, 256 MiB to 1 GiB)' })
    .option('threads', { type: 'number', describe: 'threads for Conv, Gemm and MatMul during evaluation (default: the available cores); results are identical for any count' });
}

/** Check --threads (a whole number of at least 1); undefined keeps the default. */
export function threadsFlag(v: number | undefined): number | undefined {
  if (v === undefined) return undefined;
  if (!numberFits(NUMBER_OPTIONS.threads, v)) throw new PleatError('usage', `--threads ${v}: give ${NUMBER_OPTIONS.threads.what}`);
  return v;
}

export function reportFlags<T>(y: Argv<T>) {
  return y
    .option('json', { type: 'boolean', describe: 'print the report as JSON (same as --format json)' })
    .option('format', { type: 'string', choices: [...FORMATS], describe: 'report format on stdout (default text)' })
    .option('report', { type: 'string', coerce: many, describe: 'also write a report file: FILE (.json, .xml = junit, .md, .txt, .html) or FORMAT:FILE; repeatable, one per format' })
    .option('run-figures', { type: 'boolean', default: false, describe: 'record the wall time and peak memory of the run in the report (then reports differ from run to run)' });
}

/** Flags of the commands that judge a comparison (fold's whole-model check, compare). */
export function checkFlags<T>(y: Argv<T>) {
  return y
    .option('strict', { type: 'boolean', describe: 'a skipped check fails: exit 1, and fold writes nothing (also "strict": true in the config file)' })
    .option('save-probes', { type: 'string', describe: "write the probes and the original model's float64 and float32 outputs to this new or empty DIR (ONNX backend test-data layout: test_data_set_N/input_K.pb, output_K.pb)" });
}

/** --simulate-int8 weights and --int8-granularity tensor|channel (fold and compare). */
export function int8Flags<T>(y: Argv<T>) {
  return y
    .option('simulate-int8', { type: 'string', choices: ['weights'], describe: 'also run with Conv/Gemm/MatMul weights rounded through symmetric 8-bit quantize-dequantize, and report the output error' })
    .option('int8-granularity', { type: 'string', choices: [...CHOICE_OPTIONS.simulateInt8.values], default: 'tensor', describe: 'one 8-bit scale per weight tensor or per output channel (with --simulate-int8)' });
}

/** The granularity to simulate, or undefined without --simulate-int8. */
export function int8Setting(flags: { simulateInt8?: string; int8Granularity?: string }): 'tensor' | 'channel' | undefined {
  return flags.simulateInt8 === 'weights' ? (flags.int8Granularity === 'channel' ? 'channel' : 'tensor') : undefined;
}

export function configFlags<T>(y: Argv<T>) {
  return y.option('config', { type: 'string', describe: 'defaults from this JSON file (else pleat.config.json here, if present); flags override it' });
}

export const EPILOGUE = EXIT_CODES_TEXT;
