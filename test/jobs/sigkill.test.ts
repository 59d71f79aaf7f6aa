// SIGKILL at any point (issue 11): `fold` and `export` (child processes running dist/cli/main.js) are killed
// at each step of the output transaction (PLEAT_KILL_AT, see src/jobs/outputs.ts) and at timed points of a
// run; every output path then holds the previous complete file or the new complete file, the files written
// together belong together once the next run has finished any commit the killed one had begun, and no pleat
// temporary file remains after that next run.
import { beforeAll, describe, expect, it } from 'vitest';
import { spawn, spawnSync } from 'node:child_process';
import { copyFileSync, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
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
// handled before the commit: exit 143 (130 for Ctrl-C), nothing written, no temporary left. (The hooks send the
// signal at a chosen point: PLEAT_SIGNAL_BEFORE_COMMIT just before the commit, PLEAT_SIGNAL_AFTER_STAGING on a
// batch's worker once that model is staged, the worker then staying busy.)
describe('a TERM or Ctrl-C during the work', () => {
  const run = (args: string[], env: Record<string, string>) => spawnSync(process.execPath, [CLI, ...args], {
    cwd: ROOT, encoding: 'utf8', env: { ...process.env, NO_COLOR: '1', CI: 'true', ...env },
  });

  it('fold: exits 143 before anything is renamed in', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const r = run(['fold', 'models/tray-sorter.onnx', '-o', join(dir, 't.onnx'), '--report', join(dir, 't.json'), '--quiet'], { PLEAT_SIGNAL_BEFORE_COMMIT: '1' });
    expect(r.status).toBe(143);
    expect(readdirSync(dir)).toEqual([]);
  });

  // compare renamed its probe folder in before the signal had its turn (the job committed it itself)
  it('compare --save-probes: exits 143 and writes no probe folder and no report', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const r = run(['compare', MODEL, MODEL, '--save-probes', join(dir, 'probes'), '--report', join(dir, 'c.json')], { PLEAT_SIGNAL_BEFORE_COMMIT: '1' });
    expect(r.status, r.stderr).toBe(143);
    expect(readdirSync(dir)).toEqual([]);
    // without the signal, both are written
    expect(pleat(['compare', MODEL, MODEL, '--save-probes', join(dir, 'probes'), '--report', join(dir, 'c.json')]).code).toBe(0);
    expect(readdirSync(dir).sort()).toEqual(['c.json', 'probes']);
  });

  // export wrote its bundle and exited 0: a signal during its work waited in the event loop until the bundle was
  // renamed in, and the loop then ended without reading it
  it('export: TERM exits 143 and leaves the old bundle as it was; Ctrl-C into a new folder exits 130 and makes no folder', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const bundle = join(dir, 'bundle');
    expect(pleat(['export', MODEL, '--bundle', bundle, '--keep', 'enc1.bn']).code).toBe(0);
    const before = ['weights.safetensors', 'manifest.json'].map((f) => readFileSync(join(bundle, f)));
    const term = run(['export', MODEL, '--bundle', bundle, '--json'], { PLEAT_SIGNAL_BEFORE_COMMIT: '1' });
    expect(term.status, term.stderr).toBe(143);
    expect(term.stdout).toBe('');
    expect(readdirSync(bundle).sort()).toEqual(['manifest.json', 'weights.safetensors']);
    expect(['weights.safetensors', 'manifest.json'].map((f) => readFileSync(join(bundle, f)))).toEqual(before);

    const int = run(['export', MODEL, '--bundle', join(dir, 'new'), '--bundle-format', 'c'], { PLEAT_SIGNAL_BEFORE_COMMIT: 'SIGINT' });
    expect(int.status, int.stderr).toBe(130);
    expect(int.stdout).toBe('');
    expect(readdirSync(dir)).toEqual(['bundle']);
    // and without a signal the same command writes its new folder whole
    expect(pleat(['export', MODEL, '--bundle', join(dir, 'new'), '--bundle-format', 'c']).code).toBe(0);
    expect(readdirSync(join(dir, 'new')).sort()).toEqual(['manifest.json', 'weights.c', 'weights.h']);
    expect(readdirSync(dir).sort()).toEqual(['bundle', 'new']);
  });

  // evaluate --save wrote its files and exited 0: the signal waited until after the renames, and its temporaries
  // were named in no intent record, so a killed run left them for good
  it('evaluate --save: TERM leaves the old outputs as they were, Ctrl-C makes no folder; a killed run leaves nothing for long', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const saved = join(dir, 'saved');
    expect(pleat(['evaluate', MODEL, '--save', saved, '--seed', '1']).code).toBe(0);
    const names = readdirSync(saved).sort();
    const before = names.map((f) => readFileSync(join(saved, f)));
    const term = run(['evaluate', MODEL, '--save', saved, '--seed', '2', '--json'], { PLEAT_SIGNAL_BEFORE_COMMIT: '1' });
    expect(term.status, term.stderr).toBe(143);
    expect(term.stdout).toBe('');
    expect(readdirSync(saved).sort()).toEqual(names);
    expect(names.map((f) => readFileSync(join(saved, f)))).toEqual(before);

    const int = run(['evaluate', MODEL, '--save', join(dir, 'new')], { PLEAT_SIGNAL_BEFORE_COMMIT: 'SIGINT' });
    expect(int.status, int.stderr).toBe(130);
    expect(readdirSync(dir)).toEqual(['saved']);

    killedAt('staged', ['evaluate', MODEL, '--save', saved, '--seed', '3']);
    expect(pleat(['evaluate', MODEL, '--save', saved, '--seed', '4']).code).toBe(0);
    expect(readdirSync(saved).sort()).toEqual(names);
    expect(readdirSync(dir)).toEqual(['saved']);
  });

  // --save a/b/c with no a/b: the folders above the outputs' folder were made before the work, so a run that did not
  // commit (a Ctrl-C, a kill, a refusal) left a/b behind
  it('evaluate --save into folders not there yet: none is made before the commit, all are after it', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const nested = join(dir, 'a', 'b', 'c');
    const int = run(['evaluate', MODEL, '--save', nested], { PLEAT_SIGNAL_BEFORE_COMMIT: 'SIGINT' });
    expect(int.status, int.stderr).toBe(130);
    expect(readdirSync(dir)).toEqual([]);
    const term = run(['evaluate', MODEL, '--save', nested], { PLEAT_SIGNAL_BEFORE_COMMIT: '1' });
    expect(term.status, term.stderr).toBe(143);
    expect(readdirSync(dir)).toEqual([]);
    // refused once the work is done, when the folders are claimed: p/q were made first, and stayed. Now only the
    // highest missing folder takes a temporary name, so the long name inside it is written as it is ...
    const long = pleat(['evaluate', MODEL, '--save', join(dir, 'p', 'q', 'x'.repeat(250))]);
    expect(long.code, long.stderr).toBe(0);
    expect(readdirSync(join(dir, 'p', 'q', 'x'.repeat(250)))).toContain('outputs.json');
    rmSync(join(dir, 'p'), { recursive: true });
    // ... and a highest missing folder too long for its temporary name is refused, leaving nothing
    const longTop = pleat(['evaluate', MODEL, '--save', join(dir, 'x'.repeat(250), 'c')]);
    expect(longTop.code, longTop.stderr).toBe(2);
    expect(longTop.stderr).toMatch(/^pleat: --save .*x{250}: the folder name is too long to write/);
    expect(readdirSync(dir)).toEqual([]);
    // killed before its commit: the next run writing in that folder clears what the killed one staged
    killedAt('staged', ['evaluate', MODEL, '--save', nested]);
    expect(readdirSync(dir).filter((n) => !n.startsWith('.pleat-'))).toEqual([]);
    // killed during its commit: the next run writing there finishes it (the folders whole)
    killedAt('recorded', ['evaluate', MODEL, '--save', join(dir, 'k', 'l')]);
    expect(existsSync(join(dir, 'k'))).toBe(false);
    const ok = pleat(['evaluate', MODEL, '--save', nested, '--seed', '1']);
    expect(ok.code, ok.stderr).toBe(0);
    expect(readdirSync(dir).sort()).toEqual(['a', 'k']);
    expect(readdirSync(join(dir, 'a'))).toEqual(['b']);
    expect(readdirSync(join(dir, 'a', 'b'))).toEqual(['c']);
    expect(readdirSync(nested).sort()).toEqual(readdirSync(join(dir, 'k', 'l')).sort());
    expect(readdirSync(nested)).toContain('outputs.json');
  });

  // --out-dir was made (with its missing parents) before any work and stayed when the run was refused, failed its
  // gate (exit 1, "nothing written by fold") or was cancelled
  it('fold --out-dir into folders not there yet: a run that writes nothing there leaves none of them', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const models = [MODEL, 'models/pump-vibration.onnx'];
    const outDir = join(dir, 'a', 'b');
    const refused = pleat(['fold', ...models, '--out-dir', outDir, '--dim', 'nosuch=1']);
    expect(refused.code, refused.stderr).toBe(2);
    expect(readdirSync(dir)).toEqual([]);
    const gate = pleat(['fold', ...models, '--out-dir', outDir, '--gate', 'maxAbs < 0', '--quiet']);
    expect(gate.code, gate.stderr).toBe(1);
    expect(readdirSync(dir)).toEqual([]);
    const term = run(['fold', MODEL, '--out-dir', outDir, '--quiet'], { PLEAT_SIGNAL_BEFORE_COMMIT: '1' });
    expect(term.status, term.stderr).toBe(143);
    expect(readdirSync(dir)).toEqual([]);
    // a folder that was there is never removed, even when nothing is written into it
    mkdirSync(join(dir, 'kept'));
    expect(pleat(['fold', ...models, '--out-dir', join(dir, 'kept'), '--gate', 'maxAbs < 0', '--quiet']).code).toBe(1);
    expect(readdirSync(dir)).toEqual(['kept']);
    const ok = pleat(['fold', ...models, '--out-dir', outDir, '--quiet']);
    expect(ok.code, ok.stderr).toBe(0);
    expect(readdirSync(outDir).sort()).toEqual(['pump-vibration.onnx', 'tray-edge.onnx']);
  });

  // a batch's workers had their files staged when the signal came: the process exited 143 and left them there
  it('batch: TERM while a worker holds its staged files exits 143, reports nothing, renames nothing in, leaves nothing', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const out = join(dir, 'out');
    mkdirSync(out);
    writeFileSync(join(out, 'tray-edge.onnx'), 'an older file');
    const models = ['models/tray-sorter.onnx', MODEL, 'models/pump-vibration.onnx'];
    const r = run(['fold', ...models, '--out-dir', out, '--report', join(dir, 'r.json'), '--json', '--quiet'], { PLEAT_SIGNAL_AFTER_STAGING: 'tray-edge.onnx' });
    expect(r.status, r.stderr).toBe(143);
    expect(r.stdout).toBe(''); // no job reported as done
    expect(r.stderr).toBe('');
    expect(readdirSync(out)).toEqual(['tray-edge.onnx']);
    expect(readFileSync(join(out, 'tray-edge.onnx'), 'utf8')).toBe('an older file');
    expect(readdirSync(dir).sort()).toEqual(['out']);
  });

  it('batch: Ctrl-C once every model is staged, just before the commit, exits 130 and leaves nothing', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-term-'));
    const r = run(['fold', 'models/tray-sorter.onnx', MODEL, '--out-dir', join(dir, 'out'), '--report', join(dir, 'r.json'), '--quiet'], { PLEAT_SIGNAL_BEFORE_COMMIT: 'SIGINT' });
    expect(r.status, r.stderr).toBe(130);
    expect(r.stdout).toBe('');
    expect(readdirSync(dir)).toEqual([]); // (not even the --out-dir folder it made)
  });
});
