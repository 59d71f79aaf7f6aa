// SIGKILL at any point (issue 11): `fold` and `export` (child processes running dist/cli/main.js) are killed
// at each step of the output transaction (PLEAT_KILL_AT, see src/jobs/outputs.ts) and at timed points of a
// run; every output path then holds the previous complete file or the new complete file, the files written
// together belong together once the next run has finished any commit the killed one had begun, and no pleat
// temporary file remains after that next run.
import { beforeAll, describe, expect, it } from 'vitest';
import { spawn, spawnSync } from 'node:child_process';
import { copyFileSync, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { CLI, ROOT, pleat } from '../helpers/cli.js';
import { readModelFile } from '../../src/onnx/read.js';

const MODEL = 'models/tray-edge.onnx';
const POINTS = ['staged', 'recorded', 'renamed-one', 'renamed-all'];

function killedAt(point: string, args: string[]): void {
  const r = spawnSync(process.execPath, [CLI, ...args], { encoding: 'utf8', env: { ...process.env, NO_COLOR: '1', PLEAT_KILL_AT: point } });
  expect(r.signal, `${point}: ${r.stderr}`).toBe('SIGKILL');
}

const nodes = (path: string) => readModelFile(path).graph.nodes.length;
const temporaries = (dir: string) => readdirSync(dir).filter((n) => n.startsWith('.pleat-'));

/** The state after a kill: the model is the old or the new one, byte for byte, and parses. */
function oldOrNew(path: string, old: Buffer, next: Buffer): 'old' | 'new' {
  const now = readFileSync(path);
  expect(now.equals(old) || now.equals(next)).toBe(true);
  nodes(path); // complete: it reads
  return now.equals(old) ? 'old' : 'new';
}

describe('fold killed at every step of its commit', () => {
  // the old run keeps one normalization (12 nodes), the new one folds all four (11 nodes)
  const oldArgs = (dir: string) => ['fold', MODEL, '-o', join(dir, 'out.onnx'), '--keep', 'enc1.bn', '--report', join(dir, 'r.json')];
  const newArgs = (dir: string) => ['fold', MODEL, '-o', join(dir, 'out.onnx'), '--report', join(dir, 'r.json')];

  // one old run and one reference run of the new flags, copied into each test's folder
  let old: Buffer, next: Buffer, oldReport: Buffer;
  beforeAll(() => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-kill-'));
    expect(pleat(oldArgs(dir)).code).toBe(0);
    old = readFileSync(join(dir, 'out.onnx'));
    oldReport = readFileSync(join(dir, 'r.json'));
    mkdirSync(join(dir, 'ref'));
    expect(pleat(newArgs(join(dir, 'ref'))).code).toBe(0);
    next = readFileSync(join(dir, 'ref', 'out.onnx'));
    expect(old.equals(next)).toBe(false);
  }, 120_000);

  it.each(POINTS)('killed at %s', (point) => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-kill-'));
    writeFileSync(join(dir, 'out.onnx'), old);
    writeFileSync(join(dir, 'r.json'), oldReport);

    killedAt(point, newArgs(dir));
    const which = oldOrNew(join(dir, 'out.onnx'), old, next);
    expect(which).toBe(point === 'staged' || point === 'recorded' ? 'old' : 'new');
    JSON.parse(readFileSync(join(dir, 'r.json'), 'utf8')); // the report is complete whichever it is

    // the next run writing to that folder finishes the begun commit (or drops the temporaries)
    expect(pleat(['fold', 'models/pump-vibration.onnx', '-o', join(dir, 'other.onnx')]).code).toBe(0);
    const report = JSON.parse(readFileSync(join(dir, 'r.json'), 'utf8'));
    expect(report.nodesAfter).toBe(nodes(join(dir, 'out.onnx')));
    expect(temporaries(dir)).toEqual([]);
  });

  it('killed at timed points of a run, the outputs are always whole and the next run leaves no temporary', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-kill-'));
    writeFileSync(join(dir, 'out.onnx'), old);
    writeFileSync(join(dir, 'r.json'), oldReport);
    for (const ms of [150, 400, 700, 1000, 1400, 2000]) {
      await new Promise<void>((done) => {
        const child = spawn(process.execPath, [CLI, ...newArgs(dir)], { stdio: 'ignore', env: { ...process.env, NO_COLOR: '1' } });
        const timer = setTimeout(() => child.kill('SIGKILL'), ms);
        child.on('exit', () => { clearTimeout(timer); done(); });
      });
      oldOrNew(join(dir, 'out.onnx'), old, next);
      JSON.parse(readFileSync(join(dir, 'r.json'), 'utf8'));
    }
    expect(pleat(newArgs(dir)).code).toBe(0);
    expect(readFileSync(join(dir, 'out.onnx')).equals(next)).toBe(true);
    expect(JSON.parse(readFileSync(join(dir, 'r.json'), 'utf8')).nodesAfter).toBe(nodes(join(dir, 'out.onnx')));
    expect(temporaries(dir)).toEqual([]);
  }, 300_000);
});

/** Tensor names in a safetensors file's header (8-byte little-endian length, then JSON). */
function safetensorNames(path: string): string[] {
  const b = readFileSync(path);
  const n = Number(b.readBigUInt64LE(0));
  return Object.keys(JSON.parse(b.subarray(8, 8 + n).toString('utf8'))).filter((k) => k !== '__metadata__').sort();
}

describe('export killed at every step of its commit', () => {
  let oldWeights: Buffer, oldManifest: Buffer;
  beforeAll(() => {
    const bundle = join(mkdtempSync(join(tmpdir(), 'pleat-kill-')), 'bundle');
    expect(pleat(['export', MODEL, '--bundle', bundle, '--keep', 'enc1.bn']).code).toBe(0);
    oldWeights = readFileSync(join(bundle, 'weights.safetensors'));
    oldManifest = readFileSync(join(bundle, 'manifest.json'));
  }, 120_000);

  it.each(POINTS)('killed at %s', (point) => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-kill-'));
    const src = join(dir, 'm.onnx');
    copyFileSync(MODEL, src);
    const bundle = join(dir, 'bundle');
    mkdirSync(bundle);
    writeFileSync(join(bundle, 'weights.safetensors'), oldWeights);
    writeFileSync(join(bundle, 'manifest.json'), oldManifest);
    killedAt(point, ['export', src, '--bundle', bundle]);
    for (const [f, old] of [['weights.safetensors', oldWeights], ['manifest.json', oldManifest]] as const) {
      expect(existsSync(join(bundle, f))).toBe(true);
      const now = readFileSync(join(bundle, f));
      if (point === 'staged' || point === 'recorded') expect(now.equals(old)).toBe(true);
    }
    expect(pleat(['export', src, '--bundle', bundle]).code).toBe(0);
    const manifest = JSON.parse(readFileSync(join(bundle, 'manifest.json'), 'utf8'));
    expect(Object.keys(manifest.tensors).sort()).toEqual(safetensorNames(join(bundle, 'weights.safetensors')));
    expect(temporaries(bundle)).toEqual([]);
  });
});

// A fold runs without yielding to the event loop, so a TERM (a cancelled CI job) or Ctrl-C that came during it
// was only handled after everything was renamed in: the run wrote its files and exited 0. Now the signal is
// handled before the commit: exit 143, nothing written, no temporary left. (The hook sends TERM just before.)
describe('a TERM during the fold', () => {
  it('exits 143 before anything is renamed in', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const r = spawnSync(process.execPath, [CLI, 'fold', 'models/tray-sorter.onnx', '-o', join(dir, 't.onnx'), '--report', join(dir, 't.json'), '--quiet'], {
      cwd: ROOT, encoding: 'utf8', env: { ...process.env, NO_COLOR: '1', CI: 'true', PLEAT_SIGNAL_BEFORE_COMMIT: '1' },
    });
    expect(r.status).toBe(143);
    expect(readdirSync(dir)).toEqual([]);
  });
});
