// Start-up of the command line as a user meets it: `pleat --help` in a fresh process, wall time from spawn to
// exit (best of 7), beside the yardstick of a bare `node -e 0` start measured in the same run. Target: 0.3 s.
import { spawnSync } from 'node:child_process';
import { performance } from 'node:perf_hooks';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const cli = join(dirname(fileURLToPath(import.meta.url)), '..', '..', 'cli', 'main.js');

function wall(args: string[]): number {
  let bestT = Infinity;
  for (let i = 0; i < 7; i++) {
    const t0 = performance.now();
    const r = spawnSync(process.execPath, args, { stdio: ['ignore', 'ignore', 'inherit'] });
    const t = (performance.now() - t0) / 1000;
    if (r.status !== 0) throw new Error(`${args.join(' ')} exited ${r.status}`);
    bestT = Math.min(bestT, t);
  }
  return bestT;
}

export function run(on: (k: string) => boolean, rows: string[][]): void {
  if (!on('startup')) return;
  const bare = wall(['-e', '0']);
  const help = wall([cli, '--help']);
  rows.push(['pleat --help (command line, wall)', `${help.toFixed(3)} s`, `${(help / bare).toFixed(2)}x bare node start (${bare.toFixed(3)} s)`, '<= 0.3 s', '', '']);
  // a command on a small model is start-up and module loading almost entirely (the modules its command needs)
  const small = join(dirname(fileURLToPath(import.meta.url)), '..', '..', '..', 'models', 'pump-vibration.onnx');
  for (const cmd of ['survey', 'audit']) {
    const t = wall([cli, cmd, small]);
    rows.push([`pleat ${cmd} of a small demo model (command line, wall)`, `${t.toFixed(3)} s`, `${(t / bare).toFixed(2)}x bare node start`, '', '', '']);
  }
}
