// The export job's bundle folder: checked before any work (fold's rule for -o), created when missing but never
// its parents, and never left holding a bundle file its new manifest does not list. "Before any work" is shown
// with a gate that always fails: a check made after the fold would never be reached, since a failed gate returns
// without writing (exit 1), so each refusal below would have been a silent `bundle: null`.
import { afterAll, describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { existsSync, lstatSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import '../../src/jobs/with-checks.js'; // proven folds, as the library entry point loads them
import { exportFile } from '../../src/jobs/export.js';
import { exportBundle } from '../../src/jobs/export.js';
import { readModelFile } from '../../src/onnx/read.js';
import { PleatError } from '../../src/errors.js';
import { refusedWith } from '../helpers/refused.js';

const MODEL = resolve(import.meta.dirname, '..', '..', 'models', 'pump-vibration.onnx');
const NEVER = { gate: 'maxAbs < 0', probes: 1 }; // a gate no model passes
const work = mkdtempSync(join(tmpdir(), 'pleat-export-job-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const refused = (fn: () => unknown, re: RegExp): PleatError => refusedWith(fn, re);

/** Names and bytes of a folder's entries. */
const snapshot = (dir: string) => readdirSync(dir).sort().map((n) => [n, readFileSync(join(dir, n)).toString('base64')]);

describe('export: the bundle folder', { timeout: 120_000 }, () => {
  it('refuses a folder holding the other format\'s bundle file, naming it, and changes nothing there', () => {
    const dir = join(work, 'stale');
    expect(exportFile(MODEL, dir, 'safetensors', { probes: 1 }).bundle).not.toBeNull();
    const before = snapshot(dir);
    // the C bundle would leave weights.safetensors (this model's weights) beside a manifest that does not list it
    refused(() => exportFile(MODEL, dir, 'c', NEVER), /--bundle .*stale: holds weights\.safetensors, which a c bundle does not write.*use an empty folder or remove weights\.safetensors/);
    refused(() => exportBundle(readModelFile(MODEL), dir, 'c'), /holds weights\.safetensors/);
    expect(snapshot(dir)).toEqual(before);
    // the other way round: weights.h and weights.c are not a safetensors bundle's
    const cdir = join(work, 'stale-c');
    exportFile(MODEL, cdir, 'c', { probes: 1 });
    refused(() => exportFile(MODEL, cdir, 'safetensors', NEVER), /holds weights\.h, which a safetensors bundle does not write/);
    rmSync(join(cdir, 'weights.h'));
    refused(() => exportFile(MODEL, cdir, 'safetensors', NEVER), /holds weights\.c/);
    // the same format again replaces its own files
    expect(exportFile(MODEL, dir, 'safetensors', { probes: 1, seed: 4 }).bundle!.files.map((f) => f.slice(dir.length + 1))).toEqual(['weights.safetensors', 'manifest.json']);
    expect(readdirSync(dir).sort()).toEqual(['manifest.json', 'weights.safetensors']);
  });

  it('refuses a FIFO, a folder or the input where a bundle file goes, before the fold', () => {
    const piped = join(work, 'piped');
    mkdirSync(piped);
    execFileSync('mkfifo', [join(piped, 'manifest.json')]);
    refused(() => exportFile(MODEL, piped, 'safetensors', NEVER), /manifest\.json: is a FIFO, not a file/);
    expect(lstatSync(join(piped, 'manifest.json')).isFIFO()).toBe(true);
    const blocked = join(work, 'blocked');
    mkdirSync(join(blocked, 'weights.c'), { recursive: true });
    refused(() => exportFile(MODEL, blocked, 'c', NEVER), /weights\.c: is a folder/);
    const inputs = join(work, 'inputs');
    mkdirSync(inputs);
    writeFileSync(join(inputs, 'manifest.json'), readFileSync(MODEL));
    refused(() => exportFile(join(inputs, 'manifest.json'), inputs, 'safetensors', NEVER), /refusing to overwrite the input model/);
  });

  it('creates the bundle folder, never its parents; a path through a file is refused; all before the fold', () => {
    refused(() => exportFile(MODEL, join(work, 'no', 'such', 'bundle'), 'safetensors', NEVER), /the folder .*no\/such does not exist \(pleat creates the bundle folder, not the folders above it\)/);
    expect(existsSync(join(work, 'no'))).toBe(false);
    refused(() => exportFile(MODEL, join(MODEL, 'bundle'), 'safetensors', NEVER), /a part of the path is a file, not a folder/);
    refused(() => exportFile(MODEL, MODEL, 'safetensors', NEVER), /exists and is not a folder/);
    // a failing gate writes nothing, not even the folder
    const fresh = join(work, 'fresh');
    expect(exportFile(MODEL, fresh, 'c', NEVER).bundle).toBeNull();
    expect(existsSync(fresh)).toBe(false);
    // a passing one creates it
    expect(exportFile(MODEL, fresh, 'c', { probes: 1 }).bundle).not.toBeNull();
    expect(readdirSync(fresh).sort()).toEqual(['manifest.json', 'weights.c', 'weights.h']);
  });
});

describe("the library's exportBundle", { timeout: 120_000 }, () => {
  it('writes through the output transaction: killed before its renames, it leaves only what the next run clears', () => {
    // a child process exports the demo model's weights with the public entry point and is killed where the
    // output transaction has staged every file (PLEAT_KILL_AT, src/jobs/outputs.ts); a bundle written by a path of
    // its own never got there, and its temporaries were named in no intent record (left by a kill for good)
    const dir = join(work, 'lib-bundle');
    const entry = resolve(import.meta.dirname, '..', '..', 'dist', 'src', 'index.js');
    const script = `const p = await import(${JSON.stringify(entry)}); p.exportBundle(p.readModelFile(${JSON.stringify(MODEL)}), ${JSON.stringify(dir)}, 'safetensors');`;
    let signal: string | null = null;
    try {
      execFileSync(process.execPath, ['--input-type=module', '-e', script], { env: { ...process.env, PLEAT_KILL_AT: 'staged' }, stdio: 'pipe' });
    } catch (e) {
      signal = (e as { signal: string | null }).signal;
    }
    expect(signal).toBe('SIGKILL');
    // the new folder was staged whole: nothing at its name, a temporary beside it, named in an intent record
    expect(existsSync(dir)).toBe(false);
    const left = readdirSync(work).filter((n) => n.startsWith('.pleat-'));
    expect(left.some((n) => n.endsWith('-lib-bundle.tmp'))).toBe(true);
    expect(left.some((n) => n.endsWith('.intent'))).toBe(true);
    // the next export there clears them and writes the bundle
    const r = exportBundle(readModelFile(MODEL), dir, 'safetensors');
    expect(r.readBack.status).toBe('passed');
    expect(readdirSync(dir).sort()).toEqual(['manifest.json', 'weights.safetensors']);
    expect(readdirSync(work).filter((n) => n.startsWith('.pleat-'))).toEqual([]);
  });
});
