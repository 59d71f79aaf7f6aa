// How the CLI ends: expected failures print one line and exit 2; bugs print one line asking for a report
// (the stack only with PLEAT_DEBUG=1).
import { PleatError, isPleatError } from '../src/errors.js';
import { visible } from '../src/report/format.js';

/**
 * Write one `pleat: ` line to stderr: a path or name holding a line break would split it (a script reading the
 * first line of stderr lost the rest), so control characters are shown escaped (visible, src/report/format.ts).
 */
export function sayError(text: string): void {
  process.stderr.write(`pleat: ${visible(text)}\n`);
}

export function failAndExit(e: unknown): never {
  if (isPleatError(e)) {
    sayError(e.message);
    process.exit(2);
  }
  const msg = e instanceof Error ? e.message.split('\n')[0] : String(e);
  sayError(`internal error: ${msg} (this is a bug; rerun with PLEAT_DEBUG=1 and report it)`);
  if (process.env.PLEAT_DEBUG) process.stderr.write(`${(e as Error)?.stack ?? ''}\n`);
  process.exit(3);
}

/** Whether the reader of stdout (or stderr) went away, as `pleat audit m.onnx | head -1` does after one line. */
function gone(s: NodeJS.WriteStream): boolean {
  return s.destroyed || s.writableEnded;
}

/**
 * When the reader of stdout or stderr closes its end early (`| head`), the rest of that stream's text is
 * dropped and the command carries on: files are still written as a whole or not at all, and the exit code is the
 * job's own, not an error about the pipe. (Node ignores SIGPIPE, so each write to a closed pipe fails with EPIPE;
 * unhandled, that ended in a stack trace and exit 1.) Stdout that cannot take the text for another reason (a full
 * disk) is not a bug in pleat: one line and exit 2, like any output file that cannot be written.
 */
export function guardStandardStreams(): void {
  for (const [s, label] of [[process.stdout, 'standard output'], [process.stderr, 'standard error']] as const) {
    s.on('error', (e: NodeJS.ErrnoException) => {
      if (e.code === 'EPIPE') { s.destroy(); return; }
      if (s === process.stderr) process.exit(2); // nowhere left to say why
      failAndExit(new PleatError('bad-input', `cannot write to ${label} (${e.code ?? e.message.split('\n')[0]})`));
    });
  }
}

/** Write text to stdout and resolve once it is flushed (so process.exit cannot cut it off), or once stdout is gone. */
export function out(text: string): Promise<void> {
  const s = process.stdout;
  if (gone(s)) return Promise.resolve();
  return new Promise((res) => {
    if (s.write(text)) { res(); return; }
    const done = (): void => { s.off('drain', done); s.off('close', done); res(); };
    s.once('drain', done);
    s.once('close', done);
  });
}

/** Resolve once a stream has taken everything written to it (at once when it is gone). */
export function flushed(s: NodeJS.WriteStream): Promise<void> {
  if (gone(s)) return Promise.resolve();
  return new Promise((res) => { s.write('', () => res()); });
}
