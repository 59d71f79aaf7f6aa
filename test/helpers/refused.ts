// Checks that a call is refused the way a user is meant to see it: a PleatError of the kind given, in one line.
import { expect } from 'vitest';
import { PleatError, type ErrorKind } from '../../src/errors.js';

/** Runs `fn`, expecting a one-line PleatError of `kind` (default bad-input) whose message matches `re`; returns it. */
export function refusedWith(fn: () => unknown, re: RegExp, kind: ErrorKind = 'bad-input'): PleatError {
  try {
    fn();
  } catch (e) {
    expect(e).toBeInstanceOf(PleatError);
    expect((e as PleatError).kind).toBe(kind);
    expect((e as Error).message).toMatch(re);
    expect((e as Error).message).not.toContain('\n');
    return e as PleatError;
  }
  throw new Error('expected a PleatError');
}
