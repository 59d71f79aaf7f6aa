// `pleat fold` and `pleat audit` end to end through the built CLI (npm run build first): report formats,
// schema validation, JUnit structure, batches with a bad file, config precedence, colour rules, exit codes.
// Outside checks: JSON validated with ajv against the shipped schema; JUnit parsed with fast-xml-parser; the
// folded model run by onnxruntime-node against the original; the colour test runs the CLI under a real
// pseudo-terminal from util-linux `script`.
import { beforeAll, describe, expect, it } from 'vitest';
import { spawnSync } from 'node:child_process';
import { existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { CLI, pleat } from '../helpers/cli.js';
import { runOrt } from '../helpers/ort.js';
import { parseJunit, schemaValidator } from '../report/helpers.js';

const ESC = /\u001b\[/;
const dir = mkdtempSync(join(tmpdir(), 'pleat-fold-cli-'));
const save = (name: string, bytes: Uint8Array | string) => { const p = join(dir, name); writeFileSync(p, bytes); return p; };

function bn(g: GraphBuilder, x: string, c: number, name: string, seed: number, out?: string): string {
  const r = rng(seed);
  g.init(`${name}_scale`, [c], uniform(r, c, 0.5, 1.5));
  g.init(`${name}_shift`, [c], randn(r, c, 0.2));
  g.init(`${name}_mean`, [c], randn(r, c, 0.3));
  g.init(`${name}_var`, [c], uniform(r, c, 0.2, 2));
  return g.node('BatchNormalization', [x, `${name}_scale`, `${name}_shift`, `${name}_mean`, `${name}_var`], {}, { name, outputs: out ? [out] : undefined });
}

/**
 * An inspection-camera block: act -> bn_in -> conv1 (padded) -> bn1 -> relu. bn1 folds into conv1; bn_in is
 * kept, since folding it into the padded conv1 would change the border.
 */
function trayNet(seed = 1): Uint8Array {
  const g = new GraphBuilder();
  g.input('image', [1, 3, 6, 6]).output('y', [1, 4, 6, 6]);
  const a = g.node('Relu', ['image'], {}, { name: 'act' });
  const b0 = bn(g, a, 3, 'bn_in', seed + 10);
  g.init('w', [4, 3, 3, 3], randn(rng(seed), 4 * 27, 0.4));
  const c = g.node('Conv', [b0, 'w'], { pads: [1, 1, 1, 1] }, { name: 'conv1' });
  const b1 = bn(g, c, 4, 'bn1', seed + 20);
  g.node('Relu', [b1], {}, { name: 'out_act', outputs: ['y'] });
  return modelBytes(g);
}

let tray = '', tray2 = '', bad = '';
beforeAll(() => {
  tray = save('tray.onnx', trayNet(1));
  tray2 = save('tray2.onnx', trayNet(2));
  bad = save('broken.onnx', 'this is not a model');
});

describe('pleat fold', { timeout: 180_000 }, () => {
  it('folds, writes OUT, prints the ledger; the folded model matches the original in onnxruntime-node', async () => {
    const out = join(dir, 'tray.folded.onnx');
    const r = pleat(['fold', tray, '-o', out]);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/folded\s+bn1\s+BatchNormalization\s+into conv1 \(into-producer\)/);
    expect(r.stdout).toMatch(/kept\s+bn_in\s+BatchNormalization\s+padded-consumer: /);
    expect(r.stdout).toMatch(/1 folded, 1 kept; 1 node removed/);
    expect(r.stdout).toMatch(/whole-model check: passed/);
    expect(r.stdout).toMatch(/^Caution:/m);
    expect(r.stdout).not.toMatch(ESC);
    const x = randn(rng(3), 108);
    const want = (await runOrt(readFileSync(tray), { image: { dims: [1, 3, 6, 6], data: x } })).y!;
    const got = (await runOrt(readFileSync(out), { image: { dims: [1, 3, 6, 6], data: x } })).y!;
    let maxAbs = 0, scale = 0;
    for (let i = 0; i < got.data.length; i++) { maxAbs = Math.max(maxAbs, Math.abs(got.data[i]! - want.data[i]!)); scale = Math.max(scale, Math.abs(want.data[i]!)); }
    expect(maxAbs).toBeLessThanOrEqual(1e-4 * scale);
  });

  it('--json: the fields of the report, valid against the schema; same input, same bytes', () => {
    const r1 = pleat(['fold', tray, '-o', join(dir, 'j1.onnx'), '--json']);
    const r2 = pleat(['fold', tray, '-o', join(dir, 'j2.onnx'), '--json']);
    expect(r1.code).toBe(0);
    const j = JSON.parse(r1.stdout);
    const row = (n: { node: string; status: string; direction: string | null; target: string | null; reason: string | null }) =>
      n.status === 'folded' ? [n.node, n.status, n.direction, n.target].join(':') : [n.node, n.status, n.reason].join(':');
    expect(j.normalizations.map(row).sort()).toEqual(['bn1:folded:into-producer:conv1', 'bn_in:kept:padded-consumer']);
    expect(j.nodesBefore - j.nodesAfter).toBe(1);
    expect(j.check.passed).toBe(true);
    expect(j.quantization.map((q: { target: string }) => q.target)).toEqual(['conv1']);
    const validate = schemaValidator();
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
    expect(r2.stdout.replace(/j2\.onnx/g, 'j1.onnx')).toBe(r1.stdout);
    expect(readFileSync(join(dir, 'j1.onnx'))).toEqual(readFileSync(join(dir, 'j2.onnx')));
  });

  it('a failing gate exits 1 and writes nothing', () => {
    const out = join(dir, 'never.onnx');
    const r = pleat(['fold', tray, '-o', out, '--gate', 'maxAbs < 0', '--json']);
    expect(r.code).toBe(1);
    expect(existsSync(out)).toBe(false);
    const j = JSON.parse(r.stdout);
    expect(j).toMatchObject({ failed: true, output: null });
    expect(j.check.passed).toBe(false);
  });

  it('--keep, and --report files in every format (from the extension or FORMAT:FILE), written whole', () => {
    const rep = join(dir, 'reports');
    mkdirSync(rep);
    const r = pleat(['fold', tray, '-o', join(dir, 'kept.onnx'), '--keep', 'bn1', '--format', 'markdown',
      '--report', join(rep, 'fold.json'), '--report', join(rep, 'fold.xml'), '--report', `text:${join(rep, 'fold.log')}`]);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/^### pleat fold/);
    expect(readdirSync(rep).sort()).toEqual(['fold.json', 'fold.log', 'fold.xml']);
    const j = JSON.parse(readFileSync(join(rep, 'fold.json'), 'utf8'));
    expect(j.normalizations.find((n: { node: string }) => n.node === 'bn1').reason).toBe('kept-by-user');
    const x = parseJunit(readFileSync(join(rep, 'fold.xml'), 'utf8'));
    const s = x.testsuites.testsuite[0];
    expect(s.testcase.filter((c: { skipped?: unknown }) => c.skipped)).toHaveLength(2);
    expect(s.testcase.some((c: Record<string, string>) => c['@name'] === 'check output y')).toBe(true);
    expect(readFileSync(join(rep, 'fold.log'), 'utf8')).toMatch(/kept\s+bn1\s+BatchNormalization\s+kept-by-user/);
  });

  it('--store float16: storage summary in text and JSON, proven with the half-precision gate', () => {
    const r = pleat(['fold', tray, '-o', join(dir, 'half.onnx'), '--store', 'float16', '--report', join(dir, 'half.json')]);
    expect(r.code).toBe(0);
    expect(r.stdout).toMatch(/storage float16: \d+ tensors? converted \(\d+ Cast nodes? added\), .* saved\)/);
    const j = JSON.parse(readFileSync(join(dir, 'half.json'), 'utf8'));
    expect(j.storage.store).toBe('float16');
    expect(j.storage.bytesAfter).toBeLessThan(j.storage.bytesBefore);
    expect(j.check.passed).toBe(true);
    const validate = schemaValidator();
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
  });

  it('usage errors exit 2 with one line', () => {
    for (const args of [
      ['fold', tray], // no -o / --out-dir
      ['fold', tray, tray2, '-o', join(dir, 'x.onnx')],
      ['fold', tray, '-o', join(dir, 'x.onnx'), '--json', '--format', 'junit'],
      ['fold', tray, '-o', join(dir, 'x.onnx'), '--report', 'a.json', '--report', 'json:b.txt'],
      ['fold', tray, '-o', join(dir, 'x.onnx'), '--store', 'float8'],
      ['fold', tray, '-o', tray],
    ]) {
      const r = pleat(args);
      expect(r.code, args.join(' ')).toBe(2);
      expect(r.stderr.trim().split('\n'), args.join(' ')).toHaveLength(1);
      expect(r.stderr).toMatch(/^pleat: /);
    }
  });
});

describe('batches', { timeout: 300_000 }, () => {
  it('fold A bad B --out-dir: the bad file is reported, the others written, exit 2 (the worst), input order kept', () => {
    const outDir = join(dir, 'batch-out');
    const r = pleat(['fold', tray, bad, tray2, '--out-dir', outDir, '--json']);
    expect(r.code).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/^pleat: .*broken\.onnx/);
    expect(readdirSync(outDir).sort()).toEqual(['tray.onnx', 'tray2.onnx']);
    const j = JSON.parse(r.stdout);
    expect(j.exitCode).toBe(2);
    expect(j.results.map((x: { model: string }) => x.model)).toEqual([tray, bad, tray2]);
    expect(j.results[1].error.message).toMatch(/broken\.onnx/);
    const validate = schemaValidator();
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
    // the same batch again gives the same report (deterministic whatever order workers finish in)
    const again = pleat(['fold', tray, bad, tray2, '--out-dir', join(dir, 'batch-out2'), '--json']);
    expect(again.stdout.replaceAll('batch-out2', 'batch-out')).toBe(r.stdout);
  });

  it('audit over many files: JUnit with one suite per model and an error case for the bad one', () => {
    const r = pleat(['audit', tray, tray2, bad, '--format', 'junit', '--fail-on', 'kept']);
    expect(r.code).toBe(2); // bad input outranks --fail-on
    const j = parseJunit(r.stdout);
    expect(j.testsuites.testsuite.map((s: Record<string, string>) => s['@name'])).toEqual([tray, tray2, bad]);
    expect(j.testsuites['@tests']).toBe('5');
    expect(j.testsuites['@failures']).toBe('2');
    expect(j.testsuites['@errors']).toBe('1');
  });

  it('no progress bar when piped or in CI', () => {
    const r = pleat(['audit', tray, tray2]);
    expect(r.code).toBe(0);
    expect(r.stderr).toBe('');
  });
});

describe('pleat audit', { timeout: 120_000 }, () => {
  it('agrees with fold; --fail-on kept exits 1 and makes kept ones JUnit failures', () => {
    const a = pleat(['audit', tray, '--json']);
    expect(a.code).toBe(0);
    const j = JSON.parse(a.stdout);
    expect(j.normalizations.map((n: { node: string; status: string }) => `${n.node}:${n.status}`).sort()).toEqual(['bn1:foldable', 'bn_in:kept']);
    const validate = schemaValidator();
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
    const f = pleat(['audit', tray, '--fail-on', 'kept', '--format', 'junit']);
    expect(f.code).toBe(1);
    const x = parseJunit(f.stdout);
    expect(x.testsuites['@failures']).toBe('1');
    expect(x.testsuites.testsuite[0].testcase.find((c: { failure?: unknown }) => c.failure)['@name']).toBe('bn_in BatchNormalization');
  });

  it('config: failOn and keep from pleat.config.json, --keep adds, unknown key is exit 2 naming it', () => {
    const cwd = mkdtempSync(join(tmpdir(), 'pleat-cfg-'));
    writeFileSync(join(cwd, 'pleat.config.json'), JSON.stringify({ failOn: 'kept', keep: ['bn1'] }));
    const r = pleat(['audit', tray, '--json'], { cwd });
    expect(r.code).toBe(1);
    const j = JSON.parse(r.stdout);
    expect(j.kept).toBe(2);
    expect(j.failOn).toBe('kept');
    const other = join(cwd, 'other.json');
    writeFileSync(other, JSON.stringify({ keep: [] }));
    expect(pleat(['audit', tray, '--config', other], { cwd }).code).toBe(0); // --config replaces the file here
    writeFileSync(join(cwd, 'pleat.config.json'), JSON.stringify({ failon: 'kept' }));
    const u = pleat(['audit', tray], { cwd });
    expect(u.code).toBe(2);
    expect(u.stderr).toMatch(/^pleat: .*unknown key 'failon'/);
  });

  it('a bad model alone: one line, exit 2, nothing on stdout', () => {
    const r = pleat(['audit', bad]);
    expect(r.code).toBe(2);
    expect(r.stdout).toBe('');
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
  });
});

describe('colour', { timeout: 120_000 }, () => {
  const env = (extra: Record<string, string>) => {
    const e: Record<string, string> = {};
    for (const [k, v] of Object.entries(process.env)) if (v !== undefined && k !== 'NO_COLOR' && k !== 'CI') e[k] = v;
    return { ...e, ...extra };
  };

  it('piped stdout gets no escape codes even without NO_COLOR', () => {
    const r = spawnSync(process.execPath, [CLI, 'audit', tray], { encoding: 'utf8', env: env({}) });
    expect(r.status).toBe(0);
    expect(r.stdout).not.toMatch(ESC);
    expect(r.stderr).not.toMatch(ESC);
  });

  it('a terminal gets colour, unless NO_COLOR is set', () => {
    const run = (extra: Record<string, string>) =>
      spawnSync('script', ['-qec', `${process.execPath} ${CLI} audit ${tray}`, '/dev/null'], { encoding: 'utf8', env: env(extra) });
    const tty = run({});
    if (tty.error || tty.status !== 0) return; // no pseudo-terminal here: nothing to check
    // the terminal shows stdout and stderr together; the progress bar's line erasing (ESC [K) is not colour
    const SGR = /\u001b\[[0-9;]*m/;
    expect(tty.stdout).toMatch(SGR);
    const plain = run({ NO_COLOR: '1' });
    expect(plain.stdout).toMatch(/bn_in/);
    expect(plain.stdout).not.toMatch(SGR);
  });
});
