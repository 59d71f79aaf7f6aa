// Runs a fuzz campaign: builds the base models (the demo models, plus crafted external-data, If and float16
// models), then feeds seeds to a worker thread one batch at a time. Each mutant has a time bound: a worker that
// stays silent past it is stopped, the mutant counts as a timeout, and a fresh worker goes on with the next seed.
import { Worker } from 'node:worker_threads';
import { mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { GraphBuilder, modelBytes, randn, rng, T, uniform } from '../helpers/build.js';
import type { Base, Outcome } from './worker.js';

const here = dirname(fileURLToPath(import.meta.url));
const ROOT = join(here, '..', '..', '..'); // dist/test/fuzz -> repository root (compiled), or test/fuzz -> .. (source)

function repoRoot(): string {
  for (const r of [ROOT, join(here, '..', '..')]) {
    try { if (readdirSync(join(r, 'models')).some((f) => f.endsWith('.onnx'))) return r; } catch { /* try the next */ }
  }
  throw new Error('cannot find models/');
}

/** A model whose weights live only inside If branches (outer-scope reads), with a foldable norm in one. */
function ifModel(): Uint8Array {
  const r = rng(77);
  const g = new GraphBuilder('main');
  g.input('x', [1, 3, 5, 5]).output('y', [1, 4, 5, 5]);
  g.init('cond', [], [1], T.BOOL);
  g.init('W', [4, 3, 3, 3], randn(r, 108, 0.3));
  g.init('W2', [4, 3, 1, 1], randn(r, 12, 0.3));
  const then = new GraphBuilder('then');
  then.output('t_out', [1, 4, 5, 5]);
  then.init('s', [4], uniform(r, 4, 0.5, 1.5)); then.init('b', [4], randn(r, 4));
  then.init('m', [4], randn(r, 4)); then.init('v', [4], uniform(r, 4, 0.5, 2));
  then.node('Conv', ['x', 'W'], { pads: [1, 1, 1, 1] }, { name: 'conv_t', outputs: ['ct'] });
  then.node('BatchNormalization', ['ct', 's', 'b', 'm', 'v'], {}, { name: 'bn_t', outputs: ['t_out'] });
  const other = new GraphBuilder('else');
  other.output('e_out', [1, 4, 5, 5]);
  other.node('Conv', ['x', 'W2'], {}, { name: 'conv_e', outputs: ['e_out'] });
  g.node('If', ['cond'], { then_branch: then, else_branch: other }, { name: 'branch', outputs: ['y'] });
  return modelBytes(g);
}

/** The base models; crafted ones are written into a fresh folder (the external one needs its side file there). */
export function buildBases(): Base[] {
  const root = repoRoot();
  const models = join(root, 'models');
  const bases: Base[] = readdirSync(models).filter((f) => f.endsWith('.onnx')).sort()
    .map((f) => ({ label: f, bytes: new Uint8Array(readFileSync(join(models, f))), dir: models }));
  const dir = mkdtempSync(join(tmpdir(), 'pleat-fuzz-'));
  const ext = join(dir, 'x.onnx');
  foldFile(join(models, 'tray-edge.onnx'), ext, { externalThreshold: 64, noProofs: true });
  bases.push({ label: 'external-data', bytes: new Uint8Array(readFileSync(ext)), dir });
  const ifPath = join(dir, 'if.onnx');
  writeFileSync(ifPath, ifModel());
  bases.push({ label: 'if-branches', bytes: new Uint8Array(readFileSync(ifPath)), dir });
  const half = join(dir, 'half.onnx');
  foldFile(join(models, 'pump-vibration.onnx'), half, { store: 'float16', noProofs: true });
  bases.push({ label: 'float16', bytes: new Uint8Array(readFileSync(half)), dir });
  return bases;
}

export interface CampaignResult {
  mutants: number;
  ok: number;
  pleatErrors: Record<string, number>;
  crashes: Outcome[];
  timeouts: Array<{ seed: number; base: string }>;
  seconds: number;
  slowest: { seed: number; ms: number };
}

/** Run seeds [first, first + count) with `perMutantMs` as each mutant's time bound. */
export async function runCampaign(first: number, count: number, perMutantMs: number, bases = buildBases()): Promise<CampaignResult> {
  const res: CampaignResult = { mutants: 0, ok: 0, pleatErrors: {}, crashes: [], timeouts: [], seconds: 0, slowest: { seed: -1, ms: 0 } };
  const t0 = Date.now();
  const seeds = Array.from({ length: count }, (_, i) => first + i);
  let next = 0;
  const workerFile = join(here, 'worker.js');
  while (next < seeds.length) {
    await new Promise<void>((resolve) => {
      const w = new Worker(workerFile, { resourceLimits: { maxOldGenerationSizeMb: 2048 } });
      let last = Date.now();
      let current = next;
      const watchdog = setInterval(() => {
        if (Date.now() - last > perMutantMs) {
          clearInterval(watchdog);
          res.timeouts.push({ seed: seeds[current]!, base: bases[seeds[current]! % bases.length]!.label });
          res.mutants++;
          next = current + 1;
          void w.terminate().then(() => resolve());
        }
      }, 50);
      w.on('message', (m: Outcome | 'done') => {
        if (m === 'done') { clearInterval(watchdog); next = seeds.length; void w.terminate().then(() => resolve()); return; }
        const ms = Date.now() - last;
        if (ms > res.slowest.ms) res.slowest = { seed: m.seed, ms };
        last = Date.now();
        res.mutants++;
        if (m.result === 'ok') res.ok++;
        else if (m.result === 'pleat-error') res.pleatErrors[m.kind] = (res.pleatErrors[m.kind] ?? 0) + 1;
        else res.crashes.push(m);
        current++;
        next = current;
      });
      w.on('error', (e) => {
        // the worker died (out of memory, or a crash outside the try): that mutant is a crash
        clearInterval(watchdog);
        res.crashes.push({ seed: seeds[current]!, base: bases[seeds[current]! % bases.length]!.label, what: [], result: 'crash', message: `worker died: ${e.message}`, stack: e.stack ?? '' });
        res.mutants++;
        next = current + 1;
        resolve();
      });
      w.postMessage({ bases, seeds: seeds.slice(next) });
    });
  }
  res.seconds = (Date.now() - t0) / 1000;
  return res;
}
