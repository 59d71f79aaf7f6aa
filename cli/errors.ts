// How the CLI ends: expected failures print one line and exit 2; bugs print one line asking for a report
// (the stack only with PLEAT_DEBUG=1).
import { isPleatError } from '../src/errors.js';

export function failAndExit(e: unknown): never {
  if (isPleatError(e)) {
    process.stderr.write(`pleat: ${e.message}\n`);
    process.exit(2);
  }
  const msg = e instanceof Error ? e.message.split('\n')[0] : String(e);
  process.stderr.write(`pleat: internal error: ${msg} (this is a bug; rerun with PLEAT_DEBUG=1 and report it)\n`);
  if (process.env.PLEAT_DEBUG) process.stderr.write(`${(e as Error)?.stack ?? ''}\n`);
  process.exit(3);
}

/** Write text to stdout and resolve once it is flushed (so process.exit cannot cut it off). */
export function out(text: string): Promise<void> {
  return new Promise((res) => { if (process.stdout.write(text)) res(); else process.stdout.once('drain', () => res()); });
}
