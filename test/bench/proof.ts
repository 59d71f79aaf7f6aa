// Benchmarks of the default, proven fold from the command line (issue 10, item 7; issue 11, item 11): each
// command runs in its own process, timed from start to exit, with its peak RSS, against yardsticks measured in
// the same run.
import { execFileSync, spawnSync } from 'node:child_process';
import { copyFileSync, existsSync, mkdirSync, readdirSync, rmSync, statSync } from 'node:fs';
import { performance } from 'node:perf_hooks';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { writeFoldScript } from './yardstick.js';

const here = dirname(fileURLToPath(import.meta.url));
const work = join(tmpdir(), 'pleat-bench');

/** Make a benchmark model in a child process (see child.ts: the generator's memory must not reach the measured runs). */
function generate(job: string, path: string): void {
  execFileSync(process.execPath, [join(here, 'child.js'), job, path], { stdio: 'ignore' });
}
const repo = join(here, '..', '..', '..');

interface Timed { seconds: number; maxRssBytes: number; exitCode: number; out: string }

/** Run a command to completion; wall time from spawn to exit, peak RSS from the JSON line it prints last. */
function timed(cmd: string, args: string[], okCodes = [0]): Timed {
  try { execFileSync('sync'); } catch { /* measure anyway */ }
  const t0 = performance.now();
  const r = spawnSync(cmd, args, { encoding: 'utf8', maxBuffer: 1 << 26 });
  const seconds = (performance.now() - t0) / 1000;
  if (!okCodes.includes(r.status ?? -1)) throw new Error(`${cmd} ${args.join(' ')} exited ${r.status}: ${(r.stderr || r.stdout).split('\n').filter(Boolean).pop()}`);
  const last = JSON.parse(r.stdout.trim().split('\n').pop()!) as { maxRssBytes: number; exitCode?: number };
  return { seconds, maxRssBytes: last.maxRssBytes, exitCode: last.exitCode ?? 0, out: r.stdout };
}

// exit 1 (a gate failed) is a result to report, not a failure of the measurement
const pleat = (...args: string[]) => timed(process.execPath, [join(here, 'cli-child.js'), ...args], [0, 1]);
const verdict = (t: Timed) => (t.exitCode === 0 ? '' : ` (exit ${t.exitCode}: check failed, nothing written)`);

function best(n: number, f: () => Timed): Timed {
  let b: Timed | undefined;
  for (let i = 0; i < n; i++) { const r = f(); if (!b || r.seconds < b.seconds) b = r; }
  return b!;
}

const mb = (b: number) => `${(b / 2 ** 20).toFixed(0)} MiB`;

export async function run(on: (k: string) => boolean, rows: string[][]): Promise<void> {
  if (!on('proof')) return;
  mkdirSync(work, { recursive: true });

  // (1) the 378 MB model: default proven fold against the user's own script
  const big = join(work, 'big-40x512.onnx');
  if (!existsSync(big)) { console.log('generating the 40-block benchmark model ...'); generate('write-big', big); }
  const size = statSync(big).size;
  try {
    const out = join(work, 'proven.onnx');
    rmSync(out, { force: true });
    const p = pleat('fold', big, '-o', out, '--quiet');
    const py = join(work, 'yard-folded.onnx');
    rmSync(py, { force: true });
    const fold = timed('/usr/bin/python3', [writeFoldScript(work), big, py]);
    const ort = timed(process.execPath, [join(here, 'child.js'), 'ort-pair', big, py]);
    const yard = fold.seconds + ort.seconds;
    rows.push([`pleat fold (proven, default) 378 MB, command line${verdict(p)}`, `${p.seconds.toFixed(2)} s`,
      `${(p.seconds / yard).toFixed(2)}x the user's script (${yard.toFixed(2)} s: python3-onnx + numpy fold and save ${fold.seconds.toFixed(2)} s, onnxruntime-node both models once ${ort.seconds.toFixed(2)} s)`,
      '<= 1x', `${(p.maxRssBytes / size).toFixed(2)}x file size (script: ${(Math.max(fold.maxRssBytes, ort.maxRssBytes) / size).toFixed(2)}x)`, '<= 1.3x']);
  } catch (e) { rows.push(['pleat fold (proven) 378 MB', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }

  // (1b) the same model with --unproven from the command line, against a file copy in the same run (issue 16)
  try {
    const out = join(work, 'unproven.onnx');
    const copyTo = join(work, 'copy-cli.onnx');
    // (the copy itself varies up to 2x from run to run on a shared host: the best of five)
    let copy = Infinity;
    for (let i = 0; i < 5; i++) {
      rmSync(copyTo, { force: true });
      try { execFileSync('sync'); } catch { /* measure anyway */ }
      const t0 = performance.now(); copyFileSync(big, copyTo); copy = Math.min(copy, (performance.now() - t0) / 1000);
    }
    const u = best(3, () => { rmSync(out, { force: true }); return pleat('fold', big, '-o', out, '--quiet', '--unproven'); });
    rows.push(['pleat fold --unproven 378 MB, command line', `${u.seconds.toFixed(2)} s`, `${(u.seconds / copy).toFixed(2)}x file copy (${copy.toFixed(3)} s)`,
      '<= 5x', `${(u.maxRssBytes / size).toFixed(2)}x file size`, '']);
  } catch (e) { rows.push(['pleat fold --unproven 378 MB', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }

  // (2) the smallest demo model: proven fold from the command line, start to exit
  try {
    const models = join(repo, 'models');
    const smallest = readdirSync(models).filter((f) => f.endsWith('.onnx')).map((f) => join(models, f))
      .sort((a, b) => statSync(a).size - statSync(b).size)[0]!;
    const out = join(work, 'small-folded.onnx');
    const p = best(5, () => pleat('fold', smallest, '-o', out, '--quiet'));
    const u = best(5, () => pleat('fold', smallest, '-o', out, '--quiet', '--unproven'));
    rows.push([`pleat fold (proven) ${smallest.split('/').pop()}, command line`, `${p.seconds.toFixed(3)} s`,
      `--unproven: ${u.seconds.toFixed(3)} s`, '<= 0.6 s', mb(p.maxRssBytes), '']);
  } catch (e) { rows.push(['pleat fold (proven) smallest demo model', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }

  // (3) many small folds: 33,334 blocks of 4-channel 1x1 Conv + BatchNormalization + Relu (100,002 nodes)
  try {
    const chain = join(work, 'chain-100k.onnx');
    if (!existsSync(chain)) generate('write-chain', chain);
    const out = join(work, 'chain-folded.onnx');
    // best of three each, taken in turn (a single run of either varied by 10-30% on a shared host)
    let p: Timed | undefined, u: Timed | undefined;
    for (let i = 0; i < 3; i++) {
      const pi = pleat('fold', chain, '-o', out, '--quiet');
      const ui = pleat('fold', chain, '-o', out, '--quiet', '--unproven');
      if (!p || pi.seconds < p.seconds) p = pi;
      if (!u || ui.seconds < u.seconds) u = ui;
    }
    p = p!; u = u!;
    rows.push(['pleat fold (proven) 100,002-node chain, command line', `${p.seconds.toFixed(2)} s`,
      `${(p.seconds / u.seconds).toFixed(2)}x its --unproven fold (${u.seconds.toFixed(2)} s)`, '<= 3x', mb(p.maxRssBytes), '']);
    // issue 16: --unproven against the ONNX Python library's load of the same file (start to exit)
    const load = best(3, () => timed('/usr/bin/python3', ['-c',
      'import sys, json, resource, onnx\nonnx.load(sys.argv[1])\nprint(json.dumps({"maxRssBytes": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))', chain]));
    rows.push(['pleat fold --unproven 100,002-node chain, command line', `${u.seconds.toFixed(2)} s`,
      `${(u.seconds / load.seconds).toFixed(2)}x onnx.load of the file (${load.seconds.toFixed(2)} s)`, '<= 2x',
      `${mb(u.maxRssBytes)} (onnx.load ${mb(load.maxRssBytes)})`, '']);
  } catch (e) { rows.push(['pleat fold (proven) 100,002-node chain', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }
}
