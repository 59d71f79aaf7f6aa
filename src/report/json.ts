// JSON text of a report: the one form `--json` and `--format json` print.

/**
 * JSON text for a report (or any result): two-space indent, and non-finite numbers written as the strings
 * "Infinity", "-Infinity" and "NaN", since plain JSON has no such numbers and would turn them into null.
 */
export function toJsonText(value: unknown): string {
  return JSON.stringify(value, (_k, v) => (typeof v === 'number' && !Number.isFinite(v) ? String(v) : v), 2) + '\n';
}
