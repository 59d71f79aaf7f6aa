// Small text helpers shared by the text reports.

export function bytesText(n: number): string {
  if (n < 1024) return `${n} B`;
  const units = ['KiB', 'MiB', 'GiB'];
  let v = n / 1024, u = 0;
  while (v >= 1024 && u < units.length - 1) { v /= 1024; u++; }
  return `${v >= 100 ? v.toFixed(0) : v >= 10 ? v.toFixed(1) : v.toFixed(2)} ${units[u]}`;
}

/**
 * The greatest length among texts (0 for none). A loop: spreading one value per ledger entry into Math.max
 * overflows the call stack at some 10^5 entries, and large graphs reach that.
 */
export function widest<T>(items: readonly T[], text: (x: T) => string): number {
  let w = 0;
  for (const x of items) w = Math.max(w, text(x).length);
  return w;
}

/** Append groups of lines in place (push(...lines) overflows the call stack at some 10^5 lines). */
export function append(lines: string[], ...groups: ReadonlyArray<readonly string[]>): void {
  for (const g of groups) for (const l of g) lines.push(l);
}

export function dimsText(dims: Array<number | string | null> | null): string {
  if (dims === null) return 'rank unknown';
  return `[${dims.map((d) => (d === null ? '?' : String(d))).join(' x ')}]`;
}

/** Whether to colour: only on a TTY, never with NO_COLOR set (https://no-color.org convention). */
export function useColour(stream: { isTTY?: boolean }): boolean {
  return Boolean(stream.isTTY) && !('NO_COLOR' in process.env && process.env.NO_COLOR !== undefined);
}

export const CAUTION = [
  'Caution: agreement on probe inputs is evidence, not proof of accuracy on real data.',
  'Validate the shipped model on representative data; safety-related deployments follow their own',
  'validation process and local rules.',
];

/** A metric for a text report: 3 significant digits in exponent form, 0 as 0, non-finite values by name. */
export function numText(x: number): string {
  if (Number.isNaN(x)) return 'NaN';
  if (!Number.isFinite(x)) return x > 0 ? 'inf' : '-inf';
  if (x === 0) return '0';
  return x.toExponential(2);
}

/**
 * The layer a quantization row is about: its ledger target, and with --clone-shared the copy whose weights the
 * after figures describe (`conv -> copy conv.clone`).
 */
export function quantLayerText(r: { target: string; copy?: string }): string {
  return r.copy === undefined ? r.target : `${r.target} -> copy ${r.copy}`;
}

/** A ratio such as a channel-range spread: a plain number with up to 1 decimal, or inf. */
export function ratioText(x: number): string {
  if (Number.isNaN(x)) return 'NaN';
  if (!Number.isFinite(x)) return 'inf';
  return x >= 1000 ? x.toExponential(1) : x.toFixed(1);
}

/** A level in decibels with one decimal; an infinite SQNR (the rounding changed nothing) reads 'exact'. */
export function dbText(x: number): string {
  if (Number.isNaN(x)) return 'NaN';
  if (!Number.isFinite(x)) return x > 0 ? 'exact' : '-inf';
  return x.toFixed(1);
}

/** Cosine similarity: shown as its distance from 1, which is what matters when it is near 1. */
export function cosineText(c: number): string {
  if (!Number.isFinite(c)) return String(c);
  const d = 1 - c;
  return d === 0 ? '1' : d > 0 && d < 1e-3 ? `1-${d.toExponential(1)}` : c.toFixed(6);
}

export function plural(n: number, one: string, many = `${one}s`): string {
  return `${n} ${n === 1 ? one : many}`;
}

/** Report formats: stdout's --format and the --report files. */
export const FORMATS = ['text', 'json', 'junit', 'markdown', 'html'] as const;
export type Format = (typeof FORMATS)[number];

/**
 * Control characters (a line break in a node name, an escape, a tab), and ECMA-48's C1 set, whose one-character
 * CSI (U+009B) and OSC (U+009D) some terminals act on as they do on ESC [ and ESC ]; and the bidirectional
 * formatting characters of Unicode's bidi algorithm (UAX #9, from memory: ALM U+061C, LRM/RLM U+200E-200F,
 * embeddings and overrides U+202A-202E, isolates U+2066-2069), with which a name reorders how the rest of its line
 * is displayed (the "Trojan Source" display attack, Boucher and Anderson 2021, arXiv:2111.00169).
 */
const CONTROL = /[\u0000-\u001f\u007f-\u009f\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]/;
const CONTROLS = new RegExp(CONTROL.source, 'g');

/** One control character as text: \n, \r, \t, \x1b, or \u202e above U+00FF. */
export function escapedControl(c: string): string {
  if (c === '\n') return '\\n';
  if (c === '\r') return '\\r';
  if (c === '\t') return '\\t';
  const code = c.charCodeAt(0);
  return code <= 0xff ? `\\x${code.toString(16).padStart(2, '0')}` : `\\u${code.toString(16).padStart(4, '0')}`;
}

/** The bidirectional formatting characters alone (see CONTROL): the HTML page shows them escaped too. */
export const BIDI_CONTROLS = /[\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]/g;

/**
 * Text as one visible line: control characters shown escaped (\n, \r, \t, \x1b). A line-oriented report or
 * message takes names from the model, and a name holding a line break split its line in two (a script reading
 * the lines lost the rest) or one holding an escape recoloured the terminal. Text without any is returned as is.
 */
export function visible(text: string): string {
  if (!CONTROL.test(text)) return text;
  return text.replace(CONTROLS, escapedControl);
}

/**
 * paint() marks its sequences with this in place of ESC; joinLines (below) turns the marks into ESC after showing every
 * control character of the line escaped, so an escape sequence inside a name (model data) never reaches the
 * terminal raw. A lone surrogate: no string decoded from UTF-8 (a model file, an argument, a path) can hold one.
 */
export const PAINT_MARK = '\udbff';

/** A colour sequence paint() wrote (select graphic rendition), marked as paint's (see PAINT_MARK). */
const PAINT = new RegExp(`${PAINT_MARK}\\[[0-9;]*m`, 'g');

/**
 * The lines of a text report joined, each line visible (see visible): a line holds one entry, so a control
 * character inside it came from a name, a hint or a path, never from the layout. With `colour`, the sequences
 * paint() marked become colour sequences; an escape the data holds is shown escaped like any other control.
 */
export function joinLines(lines: readonly string[], colour = false): string {
  const out = new Array<string>(lines.length);
  for (let i = 0; i < lines.length; i++) {
    const l = lines[i]!;
    out[i] = colour ? keepPaint(l) : !CONTROL.test(l) ? l : visible(l);
  }
  return out.join('\n');
}

/** A line with paint()'s colour sequences kept and every other control character made visible. */
function keepPaint(line: string): string {
  if (!line.includes(PAINT_MARK)) return visible(line);
  let out = '', at = 0;
  for (const m of line.matchAll(PAINT)) {
    out += visible(line.slice(at, m.index)) + '\u001b' + m[0].slice(PAINT_MARK.length);
    at = m.index! + m[0].length;
  }
  return out + visible(line.slice(at));
}
