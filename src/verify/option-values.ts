// The values the jobs' options may take, in one table for the library and the command line: the CLI checks its
// flags against it (cli/check-flags.ts: number ranges; the builders' choices come from here), and every library
// entry point checks the options it is given with checkOptionValues before any work, so a script is refused
// what a command line is refused (a store of 'fp16' or a NaN threshold ran silently as if not given).
// Kept free of the job code, so the command line can load it before any of the library.
import { PleatError } from '../errors.js';
import { MAX_PROBES, MAX_SEED } from './probe-bounds.js';

/** A number option: whole from `min` to `max` unless `real` (any finite number in range). */
export interface NumberRule {
  /** The command line's flag for it, when it has one that takes a number. */
  flag?: string;
  min: number;
  max?: number;
  real?: boolean;
  /** What to give, as a message ends: "give <what>". */
  what: string;
}

/** Number options by their library name. */
export const NUMBER_OPTIONS = {
  quantThresholdDb: { flag: 'quant-threshold', min: -Infinity, what: 'a number of decibels, e.g. 20', real: true },
  probes: { flag: 'probes', min: 1, max: MAX_PROBES, what: `a whole number of probe sets, from 1 to ${MAX_PROBES}` },
  seed: { flag: 'seed', min: 0, max: MAX_SEED, what: `a whole number from 0 to ${MAX_SEED} (the probe generator takes 32 bits)` },
  threads: { flag: 'threads', min: 1, what: 'a whole number of threads, 1 or more' },
  externalThreshold: { flag: 'external-data-min', min: 0, what: 'a whole number of bytes, 0 or more' },
  // (the command line takes it as text with a unit, cli/config.ts parseBytes)
  maxProbeMemory: { min: 1, max: Number.MAX_SAFE_INTEGER, what: 'a whole number of bytes above 0' },
  extraProbes: { min: 0, what: 'a whole number, 0 or more' },
} satisfies Record<string, NumberRule>;

/** Options that take one of a few words, by their library name, with the command line's flag. */
export const CHOICE_OPTIONS = {
  store: { flag: 'store', values: ['float16'] },
  simulateInt8: { flag: 'int8-granularity', values: ['tensor', 'channel'] },
  precision: { flag: 'precision', values: ['float64', 'float32'] },
  arithmetic: { flag: 'precision', values: ['float64', 'float32'] },
  failOn: { flag: 'fail-on', values: ['kept'] },
} as const satisfies Record<string, { flag: string; values: readonly string[] }>;

/** True when `v` is a number the rule allows (a whole number exactly: no larger than 2^53 - 1 in size). */
export function numberFits(rule: NumberRule, v: number): boolean {
  return (rule.real ? Number.isFinite(v) : Number.isSafeInteger(v)) && v >= rule.min && v <= (rule.max ?? Infinity);
}

// How a number is written on the command line or in a config string. Number() (and yargs) also read 0x10, 0b11,
// 0o7, 1e3, ' 3', '3 ' and 3.0, so a typo or another tool's notation ran as some other value without a word. A
// leading zero is refused too: some readers take 010 for octal 8, others for ten.
/** A size or count, never negative: decimal digits only. */
export const PLAIN_WHOLE = /^(0|[1-9][0-9]*)$/;
/** A whole number: decimal digits after an optional minus (not -0); a rule's range says whether it may be below 0. */
const PLAIN_INTEGER = /^(0|-?[1-9][0-9]*)$/;
/** A real number in decimal notation, with an optional sign, point and exponent (20, -2.5, .5, 1e-5). */
const PLAIN_REAL = /^[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)(e[+-]?[0-9]+)?$/i;

/** Whether `text` is written as the rule's kind of number is written (the range is numberFits' business). */
export function plainNumberText(rule: NumberRule, text: string): boolean {
  return (rule.real ? PLAIN_REAL : PLAIN_INTEGER).test(text);
}

const shown = (v: unknown): string => (typeof v === 'string' ? `'${v}'` : typeof v === 'number' ? String(v) : JSON.stringify(v) ?? String(v));

const refuse = (what: string, v: unknown, want: string) => new PleatError('bad-input', `option ${what} ${shown(v)}: ${want}`);

const entries = (m: unknown): Array<[string, unknown]> | undefined =>
  m instanceof Map ? [...(m as Map<string, unknown>)] : typeof m === 'object' && m !== null && !Array.isArray(m) ? Object.entries(m) : undefined;

const isSize = (v: unknown) => typeof v === 'number' && Number.isInteger(v) && v >= 0;

/**
 * Refuse (bad-input, naming the option and its value) any option value the command line would refuse for the
 * same setting. Options left undefined are not looked at; names outside the tables are not this check's.
 */
export function checkOptionValues(opts: object): void {
  const o = opts as Record<string, unknown>;
  for (const [name, rule] of Object.entries(NUMBER_OPTIONS) as Array<[string, NumberRule]>) {
    const v = o[name];
    if (v !== undefined && (typeof v !== 'number' || !numberFits(rule, v))) throw refuse(name, v, `give ${rule.what}`);
  }
  for (const [name, rule] of Object.entries(CHOICE_OPTIONS)) {
    const v = o[name];
    if (v !== undefined && !(rule.values as readonly unknown[]).includes(v)) throw refuse(name, v, `give one of ${rule.values.join(', ')}`);
  }
  if (o.dims !== undefined) {
    const list = entries(o.dims);
    if (!list) throw refuse('dims', o.dims, 'give an object (or Map) of dim sizes, e.g. { batch: 1 }');
    for (const [k, v] of list) if (!isSize(v)) throw refuse(`dims.${k}`, v, 'give a whole number, 0 or more');
  }
  if (o.shapes !== undefined) {
    const list = entries(o.shapes);
    if (!list) throw refuse('shapes', o.shapes, 'give an object (or Map) of shapes, e.g. { image: [1, 3, 224, 224] }');
    for (const [k, v] of list) if (!Array.isArray(v) || !v.every(isSize)) throw refuse(`shapes.${k}`, v, 'give an array of whole numbers, 0 or more');
  }
  if (o.keep !== undefined && !(Array.isArray(o.keep) && o.keep.every((k) => typeof k === 'string'))) {
    throw refuse('keep', o.keep, 'give an array of node names');
  }
  if (o.gate !== undefined && typeof o.gate !== 'string') throw refuse('gate', o.gate, 'give a gate expression as a string, e.g. "maxAbs < 1e-4"');
}
