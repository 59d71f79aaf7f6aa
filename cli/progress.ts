// A progress bar on stderr for long work, drawn only for a person watching: stderr is a TTY, not in CI (the CI
// variable set, as CI services do), and not with --quiet. Piped or redirected stderr never sees it.
import { visible } from '../src/report/format.js';

export interface ProgressStream {
  isTTY?: boolean;
  columns?: number;
  write(s: string): unknown;
}

export interface Progress {
  /** One unit done; `label` names what finished. */
  tick(label: string): void;
  /** Erase the bar. */
  end(): void;
}

/** CI=true (or any value other than empty, 0 or false) means an unattended run. */
export function inCi(env: NodeJS.ProcessEnv = process.env): boolean {
  const v = env.CI;
  return v !== undefined && v !== '' && v !== '0' && v.toLowerCase() !== 'false';
}

export function progressWanted(stream: ProgressStream, quiet: boolean, env: NodeJS.ProcessEnv = process.env): boolean {
  return Boolean(stream.isTTY) && !inCi(env) && !quiet;
}

const NONE: Progress = { tick: () => {}, end: () => {} };

/** A bar of `total` units, e.g. `[#####-----] 3/6 fold  last: tray.onnx`; a no-op when not wanted. */
export function startProgress(total: number, title: string, opts: { stream?: ProgressStream; quiet?: boolean; env?: NodeJS.ProcessEnv } = {}): Progress {
  const stream = opts.stream ?? process.stderr;
  if (!progressWanted(stream, opts.quiet ?? false, opts.env)) return NONE;
  let done = 0;
  const draw = (label: string) => {
    const width = 24;
    const filled = total > 0 ? Math.round((done / total) * width) : width;
    // (the label is a file name: its control characters are shown escaped, never sent to the terminal)
    const line = `[${'#'.repeat(filled)}${'-'.repeat(width - filled)}] ${done}/${total} ${title}${label ? `  last: ${visible(label)}` : ''}`;
    const cols = stream.columns ?? 80;
    stream.write(`\r\u001b[K${line.length >= cols ? line.slice(0, cols - 1) : line}`);
  };
  draw('');
  return {
    tick(label: string) { done++; draw(label); },
    end() { stream.write('\r\u001b[K'); },
  };
}
