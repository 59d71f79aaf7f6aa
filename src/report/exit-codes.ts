// pleat's exit codes, one place for the CLI, its --help epilogue and the README.
export const EXIT = {
  /** Done (a fold may keep some normalizations; that is not a failure). */
  ok: 0,
  /** A gate failed or --fail-on kept triggered; fold wrote nothing. */
  failed: 1,
  /** Bad input or usage: one line on stderr naming the file, node or flag. */
  badInput: 2,
  /** Internal error: a bug in pleat (rerun with PLEAT_DEBUG=1 and report it). */
  internal: 3,
} as const;

export type ExitCode = (typeof EXIT)[keyof typeof EXIT];

/** The exit codes as the --help epilogue prints them. */
export const EXIT_CODES_TEXT = [
  'Exit codes:',
  '  0  done',
  '  1  a gate or --fail-on kept failed (fold writes nothing)',
  '  2  bad input or usage (one line on stderr)',
  '  3  internal error: a bug in pleat (rerun with PLEAT_DEBUG=1 and report it)',
  'A batch over several models exits with the worst code of its models.',
].join('\n');

/** The worse of two exit codes: internal > bad input > failed > ok. */
export function worseExit(a: number, b: number): number {
  return Math.max(a, b);
}
