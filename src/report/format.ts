// Small text helpers shared by the text reports.

export function bytesText(n: number): string {
  if (n < 1024) return `${n} B`;
  const units = ['KiB', 'MiB', 'GiB'];
  let v = n / 1024, u = 0;
  while (v >= 1024 && u < units.length - 1) { v /= 1024; u++; }
  return `${v >= 100 ? v.toFixed(0) : v >= 10 ? v.toFixed(1) : v.toFixed(2)} ${units[u]}`;
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
