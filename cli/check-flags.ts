// Checks the command line against the command's own option table before yargs' validation, so every mistake
// gets one line of our wording: unknown options (with their dashes and the nearest known one), a single-value
// option given twice, a value outside an option's choices (listed from the table), numbers not written in plain
// decimal notation (0x10, 1e3 or ' 3' for a count), not whole or out of range, and an option missing its value.
// The table comes from the command's builder, so new options and choices are checked without edits here.
import { PleatError } from '../src/errors.js';
import { numberFits, plainNumberText } from '../src/verify/option-values.js';
import { NUMBER_RULES, REPEATABLE } from './flags.js';
import { nearest } from './suggest.js';

/** What yargs' getOptions() tells about the options of the command being run (the parts used here). */
export interface OptionTable {
  key: Record<string, unknown>;
  alias: Record<string, string[]>;
  boolean: string[];
  number: string[];
  choices: Record<string, unknown[]>;
}

interface Token { spelled: string; name: string; value: string | undefined; hasInline: boolean }

const kebab = (s: string) => s.replace(/[A-Z]/g, (c) => `-${c.toLowerCase()}`);

/** The option tokens of the command line (stops at `--`); values are the next token or the text after `=`. */
function tokens(args: readonly string[], takesValue: (name: string) => boolean): Token[] {
  const found: Token[] = [];
  for (let i = 0; i < args.length; i++) {
    const a = args[i]!;
    if (a === '--') break;
    if (!a.startsWith('-') || a === '-' || /^-\d/.test(a) || /^-\.\d/.test(a)) continue;
    const body = a.replace(/^--?/, '');
    const eq = body.indexOf('=');
    const name = eq >= 0 ? body.slice(0, eq) : body;
    let value: string | undefined;
    if (eq >= 0) value = body.slice(eq + 1);
    else if (takesValue(name) && i + 1 < args.length && !(args[i + 1]!.startsWith('-') && !/^-[\d.]/.test(args[i + 1]!))) value = args[++i];
    found.push({ spelled: a.slice(0, a.length - (eq >= 0 ? body.length - eq : 0)), name, value, hasInline: eq >= 0 });
  }
  return found;
}

/** Throws a usage PleatError for the first problem found in `args` (the words after the command name). */
export function checkFlags(args: readonly string[], table: OptionTable): void {
  // canonical (long, kebab-case) name of every spelling yargs accepts
  const canonical = new Map<string, string>();
  const longNames: string[] = [];
  for (const k of Object.keys(table.key)) {
    const main = Object.entries(table.alias).find(([, al]) => al.includes(k))?.[0] ?? k;
    canonical.set(k, main);
    canonical.set(kebab(k), main);
    if (k.length > 1 && main === k) longNames.push(k);
  }
  canonical.set('h', 'help');
  const isBoolean = (n: string) => table.boolean.includes(n);
  const resolve = (name: string): string | undefined => {
    const direct = canonical.get(name);
    if (direct !== undefined) return direct;
    if (name.startsWith('no-') && isBoolean(canonical.get(name.slice(3)) ?? '')) return canonical.get(name.slice(3));
    return undefined;
  };
  const toks = tokens(args, (n) => { const c = resolve(n); return c !== undefined && !isBoolean(c); });

  const counts = new Map<string, Token[]>();
  for (const t of toks) {
    const c = resolve(t.name);
    if (c === undefined) {
      const guess = nearest(t.name.replace(/^no-/, ''), longNames);
      throw new PleatError('usage', `unknown option ${t.spelled}${guess ? ` (did you mean --${guess}?)` : ''}; see the command's --help`);
    }
    counts.set(c, [...(counts.get(c) ?? []), t]);
  }
  for (const [name, ts] of counts) {
    if (name === 'help' || name === 'version' || isBoolean(name)) continue;
    const first = ts[0]!;
    for (const t of ts) {
      if (t.value === undefined || (t.value === '' && !t.hasInline)) throw new PleatError('usage', `${t.spelled} needs a value`);
    }
    if (ts.length > 1 && !REPEATABLE.has(name)) {
      const spellings = [...new Set(ts.map((t) => t.spelled))].join('/');
      throw new PleatError('usage', `${spellings} given twice (${ts.map((t) => `'${t.value}'`).join(' and ')}); it takes one value, give it once`);
    }
    const allowed = table.choices[name];
    if (allowed && !allowed.includes(first.value)) {
      throw new PleatError('usage', `${first.spelled} must be one of ${allowed.join(', ')} (got '${first.value}')`);
    }
    if (table.number.includes(name)) {
      const rule = NUMBER_RULES[name] ?? { min: 0, what: 'a whole number (0 or more)' };
      const text = first.value!;
      // (the value as given: quoted when a space or nothing would not show in the line)
      const shown = text === '' || /\s/.test(text) ? `'${text}'` : text;
      if (!plainNumberText(rule, text)) {
        const how = rule.real ? 'in decimal notation (e.g. 20, -2.5 or 1e-5)' : 'in plain decimal digits';
        throw new PleatError('usage', `${first.spelled} ${shown}: give ${rule.what}, written ${how}`);
      }
      if (!numberFits(rule, Number(text))) throw new PleatError('usage', `${first.spelled} ${shown}: give ${rule.what}`);
    }
  }
}
