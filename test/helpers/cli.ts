// Runs the built CLI (npm test builds first) as a user would, capturing stdout, stderr and the exit code.
import { spawnSync } from 'node:child_process';
import { fileURLToPath } from 'node:url';
import { dirname, join } from 'node:path';

export const ROOT = join(dirname(fileURLToPath(import.meta.url)), '..', '..');
export const CLI = join(ROOT, 'dist', 'cli', 'main.js');

export function pleat(args: string[], opts: { cwd?: string; env?: Record<string, string> } = {}): { code: number; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], {
    cwd: opts.cwd ?? ROOT, encoding: 'utf8', env: { ...process.env, NO_COLOR: '1', CI: 'true', ...opts.env },
  });
  return { code: r.status ?? -1, stdout: r.stdout, stderr: r.stderr };
}
