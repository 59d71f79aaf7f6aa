// `pleat compare` and `pleat evaluate` end to end through the built CLI (npm run build first).
// Outside checks: evaluate's saved outputs against onnxruntime-node on the same input; the .npy files are
// read with a reader written from NumPy's format description (test/helpers/npy.ts); compare's JSON is
// validated against the shipped JSON Schema with ajv.
import { beforeAll, describe, expect, it } from 'vitest';
import { SCHEMA_VERSION } from '../../src/jobs/types.js';
import { existsSync, lstatSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { pleat } from '../helpers/cli.js';
import { runOrt } from '../helpers/ort.js';
import { npyFloat32, readNpyHeader } from '../helpers/npy.js';
import { schemaValidator } from '../report/helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-cmp-'));
const save = (name: string, bytes: Uint8Array) => { const p = join(dir, name); writeFileSync(p, bytes); return p; };

/** Conv (2 -> 3 channels, 3x3, pad 1) then Relu; `w` perturbs the weights for a model that differs. */
function net(delta = 0, outName = 'y'): Uint8Array {
  const r = rng(5);
  const g = new GraphBuilder();
  g.input('x', ['batch', 2, 5, 5]).output(outName, ['batch', 3, 5, 5]);
  const w = randn(r, 3 * 2 * 9, 0.5);
  w[0]! += delta;
  g.init('w', [3, 2, 3, 3], w);
  g.init('b', [3], [0.1, -0.2, 0.3]);
  g.node('Conv', ['x', 'w', 'b'], { pads: [1, 1, 1, 1] }, { name: 'conv', outputs: ['c'] });
  g.node('Relu', ['c'], {}, { name: 'relu', outputs: [outName] });
  return modelBytes(g);
}

let a = '', same = '', off = '', renamed = '';
beforeAll(() => {
  a = save('a.onnx', net());
  same = save('same.onnx', net());
  off = save('off.onnx', net(0.5));
  renamed = save('renamed.onnx', net(0, 'z'));
});

describe('pleat compare', { timeout: 120_000 }, () => {
  it('identical models pass with exit 0; JSON validates against the schema', () => {
    const r = pleat(['compare', a, same, '--dim', 'batch=1', '--json']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j).toMatchObject({ schemaVersion: SCHEMA_VERSION, command: 'compare', a, b: same, status: 'passed', passed: true, probes: 3, assumedDims: [] });
    expect(j.outputs[0].metrics.maxAbs).toBe(0);
    const validate = schemaValidator();
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
  });

  it('a changed weight fails the gate: exit 1, text names the output', () => {
    const r = pleat(['compare', a, off, '--dim', 'batch=2']);
    expect(r.code).toBe(1);
    expect(r.stdout).toMatch(/FAILED/);
    expect(r.stdout).toMatch(/y\s+FAIL/);
    expect(r.stdout).toMatch(/^Caution:/m);
  });

  it('a user gate can pass what the default fails', () => {
    expect(pleat(['compare', a, off, '--dim', 'batch=1', '--gate', 'cosine > 0.5']).code).toBe(0);
  });

  it('outputs with different names are a failure (exit 1), reported as such', () => {
    const r = pleat(['compare', a, renamed, '--dim', 'batch=1', '--json']);
    expect(r.code).toBe(1);
    const j = JSON.parse(r.stdout);
    expect(j.outputs.map((o: { status: string }) => o.status)).toEqual(['only-in-a', 'only-in-b']);
  });

  it('a dim no flag sets takes 1 for the probes and is listed; JUnit goes to --report atomically', () => {
    const r = pleat(['compare', a, same]);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/passed/);
    expect(r.stdout).toMatch(/probe dim batch = 1 \(no --dim given\) for input x/);
    const rep = join(dir, 'cmp.xml');
    expect(pleat(['compare', a, same, '--dim', 'batch=1', '--report', rep]).code).toBe(0);
    expect(readFileSync(rep, 'utf8')).toMatch(/<testsuites name="pleat compare" tests="1" failures="0"/);
  });

  it('config supplies the dim; flags override the config', () => {
    const cwd = mkdtempSync(join(tmpdir(), 'pleat-cfgcmp-'));
    writeFileSync(join(cwd, 'pleat.config.json'), JSON.stringify({ dims: { batch: 1 }, gate: 'cosine > 0.5' }));
    expect(pleat(['compare', a, off], { cwd }).code).toBe(0); // the config's gate
    expect(pleat(['compare', a, off, '--gate', 'maxAbs == 0'], { cwd }).code).toBe(1); // the flag's
    writeFileSync(join(cwd, 'pleat.config.json'), JSON.stringify({ dimz: { batch: 1 } }));
    const r = pleat(['compare', a, same], { cwd });
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/unknown key 'dimz'/);
  });
});

describe('pleat evaluate', { timeout: 120_000 }, () => {
  it('writes DIR/<output>.npy and outputs.json, matching onnxruntime-node on the same input', async () => {
    const x = randn(rng(9), 2 * 2 * 5 * 5);
    const xFile = save('x.npy', npyFloat32([2, 2, 5, 5], x));
    const out = join(dir, 'eval-out');
    const r = pleat(['evaluate', a, '--input', `x=${xFile}`, '--save', out]);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/output y \[2x3x5x5\]/);
    expect(JSON.parse(readFileSync(join(out, 'outputs.json'), 'utf8'))).toEqual({ y: 'y.npy' });
    const bytes = new Uint8Array(readFileSync(join(out, 'y.npy')));
    const h = readNpyHeader(bytes);
    expect(h.descr).toBe('<f4');
    expect(h.shape).toEqual([2, 3, 5, 5]);
    const got = new Float32Array(bytes.slice(h.dataOffset).buffer);
    const want = (await runOrt(readFileSync(a), { x: { dims: [2, 2, 5, 5], data: x } })).y!;
    let maxAbs = 0;
    for (let i = 0; i < got.length; i++) maxAbs = Math.max(maxAbs, Math.abs(got[i]! - want.data[i]!));
    expect(maxAbs).toBeLessThan(1e-5);
  });

  it('seeded inputs with --shape; --json says what was saved; same seed, same bytes', () => {
    const o1 = join(dir, 'e1'), o2 = join(dir, 'e2');
    const r = pleat(['evaluate', a, '--shape', 'x=1x2x5x5', '--seed', '4', '--precision', 'float32', '--save', o1, '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j).toMatchObject({ command: 'evaluate', precision: 'float32', seed: 4 });
    expect(j.outputs[0]).toMatchObject({ name: 'y', file: 'y.npy', dims: [1, 3, 5, 5] });
    pleat(['evaluate', a, '--shape', 'x=1x2x5x5', '--seed', '4', '--precision', 'float32', '--save', o2]);
    expect(readFileSync(join(o1, 'y.npy'))).toEqual(readFileSync(join(o2, 'y.npy')));
  });

  it('a FIFO where --save would put a file is refused, and left a FIFO', () => {
    const out = join(dir, 'eval-fifo');
    mkdirSync(out);
    execFileSync('mkfifo', [join(out, 'outputs.json')]);
    const r = pleat(['evaluate', a, '--shape', 'x=1x2x5x5', '--save', out]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/^pleat: .*outputs\.json: is a FIFO, not a file;/);
    expect(readdirSync(out)).toEqual(['outputs.json']);
    expect(lstatSync(join(out, 'outputs.json')).isFIFO()).toBe(true);
  });

  it('--save is checked before the work, against the file names the model\'s outputs will have', () => {
    // a file where the folder goes, with a probe budget the run would exceed: the --save refusal comes first
    const file = join(dir, 'save-is-a-file');
    writeFileSync(file, 'mine');
    const r = pleat(['evaluate', a, '--shape', 'x=1x2x5x5', '--save', file, '--max-probe-memory', '1K']);
    expect(r.code).toBe(2);
    expect(r.stderr).toBe(`pleat: ${file}: cannot create the output folder (EEXIST)\n`);
    expect(readFileSync(file, 'utf8')).toBe('mine');
    // a FIFO at an output's own name (y.npy, from the graph's output y) is refused before the work too
    const out = join(dir, 'eval-fifo-output');
    mkdirSync(out);
    execFileSync('mkfifo', [join(out, 'y.npy')]);
    const f = pleat(['evaluate', a, '--shape', 'x=1x2x5x5', '--save', out, '--max-probe-memory', '1K']);
    expect(f.code).toBe(2);
    expect(f.stderr).toMatch(/^pleat: .*y\.npy: is a FIFO, not a file;/);
    expect(readdirSync(out)).toEqual(['y.npy']);
    // the check claims nothing: a good --save still works, and makes its folder only at the commit
    const good = join(dir, 'eval-new', 'deep');
    expect(pleat(['evaluate', a, '--shape', 'x=1x2x5x5', '--save', good]).code).toBe(0);
    expect(readdirSync(good).sort()).toEqual(['outputs.json', 'y.npy']);
  });

  it('--save is required; a wrong input shape is bad input naming both shapes', () => {
    const r = pleat(['evaluate', a, '--dim', 'batch=1']);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/save/);
    const xFile = save('bad.npy', npyFloat32([1, 3, 5, 5], new Float32Array(75)));
    const r2 = pleat(['evaluate', a, '--input', `x=${xFile}`, '--save', join(dir, 'never')]);
    expect(r2.code).toBe(2);
    expect(r2.stderr).toMatch(/input 'x' expects shape \[batch,2,5,5\]/);
    expect(existsSync(join(dir, 'never', 'y.npy'))).toBe(false);
  });
});
