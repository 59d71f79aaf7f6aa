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
