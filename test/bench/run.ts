// `npm run bench`: speed and memory as ratios against yardsticks measured in the same run.
// Not a test: the figures go into the README by hand.
import { copyFileSync, existsSync, mkdirSync, rmSync, statSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { performance } from 'node:perf_hooks';
import { tmpdir } from 'node:os';
import { join, dirname } from 'node:path';
import { fileURLToPath } from 'node:url';

const here = dirname(fileURLToPath(import.meta.url));
const work = join(tmpdir(), 'pleat-bench');

/** Make a benchmark model in a child process (see child.ts: the generator's memory must not reach the measured runs). */
function generate(job: string, path: string): void {
  execFileSync(process.execPath, [join(here, 'child.js'), job, path], { stdio: 'ignore' });
}
mkdirSync(work, { recursive: true });

/** Flush dirty pages first, so no measurement pays for writing back what an earlier one wrote. */
function settle(): void {
  try { execFileSync('sync'); } catch { /* no sync command: measure anyway */ }
}

function child(job: string, ...args: string[]): { seconds: number; maxRssBytes: number; [k: string]: unknown } {
  settle();
  const out = execFileSync(process.execPath, [join(here, 'child.js'), job, ...args], { encoding: 'utf8', maxBuffer: 1 << 24 });
  return JSON.parse(out.trim().split('\n').pop()!);
}

function best<T extends { seconds: number }>(n: number, f: () => T): T {
  let b: T | undefined;
  for (let i = 0; i < n; i++) { const r = f(); if (!b || r.seconds < b.seconds) b = r; }
  return b!;
}

function copyTime(src: string, dst: string): number {
  let bestT = Infinity;
  for (let i = 0; i < 3; i++) {
    rmSync(dst, { force: true });
    settle();
    const t0 = performance.now();
    copyFileSync(src, dst);
    bestT = Math.min(bestT, (performance.now() - t0) / 1000);
  }
  return bestT;
}

const rows: string[][] = [];
const want = (process.argv[2] ?? 'all').split(',');
const on = (k: string) => want.includes('all') || want.includes(k);

if (on('io') || on('fold')) {
  const big = join(work, 'big-40x512.onnx');
  if (!existsSync(big)) { console.log('generating the 40-block benchmark model ...'); generate('write-big', big); }
  const size = statSync(big).size;
  const copy = copyTime(big, join(work, 'copy.onnx'));
  console.log(`benchmark model: ${(size / 1e6).toFixed(1)} MB; file copy ${copy.toFixed(3)} s`);
  if (on('io')) {
    const out = join(work, 'rewritten.onnx');
    // like the copy yardstick, each run writes a new file (replacing a big one would time its removal too)
    const r = best(3, () => { rmSync(out, { force: true }); return child('load-write', big, out); });
    rows.push(['load + write (378 MB)', `${r.seconds.toFixed(3)} s`, `${(r.seconds / copy).toFixed(2)}x file copy`, '<= 3x',
      `${(r.maxRssBytes / size).toFixed(2)}x file size`, '<= 1.3x']);
  }
  if (on('fold')) {
    try {
      const out = join(work, 'folded.onnx');
      const r = best(3, () => { rmSync(out, { force: true }); return child('fold', big, out); });
      rows.push(['fold 40 blocks (378 MB)', `${r.seconds.toFixed(3)} s`, `${(r.seconds / copy).toFixed(2)}x file copy`, '<= 5x',
        `${(r.maxRssBytes / size).toFixed(2)}x file size`, '<= 1.3x']);
    } catch (e) { rows.push(['fold 40 blocks', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }
  }
}

const extraBenches = join(here, 'more.js');
if (existsSync(extraBenches)) {
  const more = await import(extraBenches) as { run(on: (k: string) => boolean, rows: string[][]): Promise<void> };
  await more.run(on, rows);
}

const proof = await import('./proof.js');
await proof.run(on, rows);
(await import('./startup.js')).run(on, rows);

console.log('\n| measure | time | ratio | target | memory | target |');
console.log('|---|---|---|---|---|---|');
for (const r of rows) console.log(`| ${r.join(' | ')} |`);
