// The whole-model check's status through the built CLI: `passed` only when at least one probe compared at least
// one element of every output; a comparison that compared nothing is `skipped` with a reason code, in every
// format (JSON, text, JUnit, Markdown), in fold and in compare; symbolic dims without --dim take size 1 and are
// listed; a probe dim of 0 is refused; --strict (flag or config) turns a skipped check into exit 1 with nothing
// written. Outside checks: JSON validated with ajv against the shipped schema; JUnit read back with
// fast-xml-parser (a general XML parser).
import { describe, expect, it } from 'vitest';
import { existsSync, mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { ROOT, pleat } from '../helpers/cli.js';
import { parseJunit, schemaValidator } from '../report/helpers.js';
import { npyInt64 } from '../helpers/npy.js';
import { readModelFile } from '../../src/onnx/read.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-check-status-'));
const save = (name: string, bytes: Uint8Array | string) => { const p = join(dir, name); writeFileSync(p, bytes); return p; };
const SORTER = join(ROOT, 'models', 'tray-sorter.onnx');

function convBn(g: GraphBuilder, x: string, cin: number, cout: number, name: string, seed: number): string {
  const r = rng(seed);
  g.init(`${name}_w`, [cout, cin, 1, 1], randn(r, cout * cin, 0.5));
  const c = g.node('Conv', [x, `${name}_w`], {}, { name: `${name}_conv` });
  g.init(`${name}_scale`, [cout], uniform(r, cout, 0.5, 1.5));
  g.init(`${name}_shift`, [cout], randn(r, cout, 0.2));
  g.init(`${name}_mean`, [cout], randn(r, cout, 0.3));
  g.init(`${name}_var`, [cout], uniform(r, cout, 0.2, 2));
  return g.node('BatchNormalization', [c, `${name}_scale`, `${name}_shift`, `${name}_mean`, `${name}_var`], {}, { name: `${name}_bn` });
}

/** A foldable block followed by an operator of a private domain that no evaluator has a kernel for. */
function noKernelModel(): string {
  const g = new GraphBuilder();
  g.input('x', [1, 3, 4, 4]).output('y', [1, 4, 4, 4]);
  const b = convBn(g, 'x', 3, 4, 'blk', 3);
  g.node('Lens', [b], {}, { name: 'lens', outputs: ['y'], domain: 'com.traylab' });
  return save('no-kernel.onnx', modelBytes(g, { extraOpsets: [['com.traylab', 1]] }));
}

/** A foldable block whose second output is empty (a slice of length 0): that output can never be compared. */
function emptyOutputModel(): string {
  const g = new GraphBuilder();
  g.input('x', [1, 3, 4, 4]).output('y', [1, 4, 4, 4]).output('none', [0, 3, 4, 4]);
  const b = convBn(g, 'x', 3, 4, 'blk', 4);
  g.node('Relu', [b], {}, { name: 'act', outputs: ['y'] });
  g.init('s0', [1], [0], 7); g.init('e0', [1], [0], 7); g.init('ax', [1], [0], 7);
  g.node('Slice', ['x', 's0', 'e0', 'ax'], {}, { name: 'empty', outputs: ['none'] });
  return save('empty-output.onnx', modelBytes(g));
}

/**
 * A foldable block beside an int64 path whose output passes 2^53 (x + 2^60): float64, the evaluator's value store,
 * may round such integers (IEEE 754 binary64), so that output can never be compared exactly.
 */
function wideOutputModel(): string {
  const g = new GraphBuilder();
  g.input('x', [1, 3, 4, 4]).input('ids', [2], 7).output('y', [1, 4, 4, 4]).output('key', [2], 7);
  const b = convBn(g, 'x', 3, 4, 'blk', 5);
  g.node('Relu', [b], {}, { name: 'act', outputs: ['y'] });
  g.init('offset', [1], [2 ** 60], 7);
  g.node('Add', ['ids', 'offset'], {}, { name: 'keyed', outputs: ['key'] });
  return save('wide-output.onnx', modelBytes(g));
}

const json = (stdout: string) => JSON.parse(stdout);

describe('check status', { timeout: 180_000 }, () => {
  it('symbolic batch dim without --dim: probes use size 1, listed; status passed with elements compared', () => {
    const out = join(dir, 'sorter.onnx');
    const r = pleat(['fold', SORTER, '-o', out, '--json']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const j = json(r.stdout);
    expect(schemaValidator()(j)).toBe(true);
    expect(j.check.status).toBe('passed');
    expect(j.check.passed).toBe(true);
    expect(j.check.skipped).toBeNull();
    expect(j.check.probes).toBeGreaterThanOrEqual(1);
    expect(j.check.assumedDims).toEqual([{ symbol: 'batch', size: 1, inputs: ['image'] }]);
    for (const o of j.check.outputs) expect(o.count).toBeGreaterThan(0);
    // every folded ledger entry carries its proof's figures
    const folded = j.normalizations.filter((e: { status: string }) => e.status === 'folded');
    expect(folded.length).toBeGreaterThan(0);
    for (const e of folded) {
      expect(Object.keys(e.proof)).toEqual(['maxAbs', 'maxRel', 'shape']);
      expect(e.proof.maxAbs).toBeLessThan(1e-4);
      expect(e.proof.shape.length).toBe(4);
    }
    expect(j.check.coverage.total).toBeGreaterThan(0);
    expect(j.check.coverage.executed).toBe(j.check.coverage.total);
    const t = pleat(['fold', SORTER, '-o', out]);
    expect(t.stdout).toMatch(/whole-model check: passed/);
    expect(t.stdout).toMatch(/dim batch = 1 \(no --dim given\) for input image/);
  });

  it('--dim batch=0 is refused for probes: exit 2, one line naming the dim, nothing written', () => {
    const out = join(dir, 'zero.onnx');
    const r = pleat(['fold', SORTER, '-o', out, '--dim', 'batch=0']);
    expect(r.code).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/--dim batch=0/);
    expect(existsSync(out)).toBe(false);
    const c = pleat(['compare', SORTER, SORTER, '--dim', 'batch=0']);
    expect(c.code).toBe(2);
    expect(c.stderr).toMatch(/--dim batch=0/);
  });

  it('an operator without a kernel: skipped with reason no-kernel in JSON, text, JUnit and Markdown; never passed', () => {
    const m = noKernelModel();
    const out = join(dir, 'nk.onnx');
    const r = pleat(['fold', m, '-o', out, '--json']);
    expect(r.code).toBe(0);
    const j = json(r.stdout);
    expect(schemaValidator()(j)).toBe(true);
    expect(j.check.status).toBe('skipped');
    expect(j.check.passed).toBe(false);
    expect(j.check.skipped.reason).toBe('no-kernel');
    expect(j.check.skipped.message).toMatch(/Lens/);
    expect(existsSync(out)).toBe(true);
    // the file written records the status the check ended with (it was staged before the check ran)
    expect(readModelFile(out).metadata.find(([k]) => k === 'pleat.check.status')).toEqual(['pleat.check.status', 'skipped']);

    const t = pleat(['fold', m, '-o', out]);
    expect(t.stdout).toMatch(/whole-model check: skipped \(no-kernel\)/);
    expect(t.stdout).not.toMatch(/check: passed/);

    const x = pleat(['fold', m, '-o', out, '--format', 'junit']);
    const doc = parseJunit(x.stdout);
    const cases = doc.testsuites.testsuite[0].testcase as Array<{ '@name': string; skipped?: { '@message': string }; failure?: unknown }>;
    const check = cases.filter((c) => c['@name'].startsWith('whole-model check') || c['@name'].startsWith('check output'));
    expect(check).toHaveLength(1);
    expect(check[0]!.skipped!['@message']).toMatch(/^no-kernel: /);
    expect(doc.testsuites['@skipped']).toBe('1');

    const md = pleat(['fold', m, '-o', out, '--format', 'markdown']);
    expect(md.stdout).toMatch(/whole-model check skipped \(`no-kernel`/);
  });

  it('an output with zero elements: skipped (no-elements), not passed, in fold and in compare', () => {
    const m = emptyOutputModel();
    const r = pleat(['fold', m, '-o', join(dir, 'eo.onnx'), '--json']);
    expect(r.code).toBe(0);
    const j = json(r.stdout);
    expect(schemaValidator()(j)).toBe(true);
    expect(j.check.status).toBe('skipped');
    expect(j.check.skipped.reason).toBe('no-elements');
    expect(j.check.skipped.message).toMatch(/'none'/);
    const c = pleat(['compare', m, m, '--json']);
    expect(c.code).toBe(0);
    const cj = json(c.stdout);
    expect(schemaValidator()(cj)).toBe(true);
    expect(cj.status).toBe('skipped');
    expect(cj.passed).toBe(false);
    expect(cj.skipped.reason).toBe('no-elements');
    const cx = parseJunit(pleat(['compare', m, m, '--format', 'junit']).stdout);
    const none = (cx.testsuites.testsuite[0].testcase as Array<{ '@name': string; skipped?: unknown }>).find((k) => k['@name'] === 'output none');
    expect(none?.skipped).toBeDefined();
  });

  it('an int64 output at or beyond 2^53: skipped (wide-integers), not passed, in fold, compare and every format; evaluate refuses it', () => {
    const m = wideOutputModel();
    const out = join(dir, 'wide.onnx');
    const r = pleat(['fold', m, '-o', out, '--json']);
    expect(r.code).toBe(0);
    const j = json(r.stdout);
    expect(schemaValidator()(j)).toBe(true);
    expect(j.normalizations.map((n: { status: string }) => n.status)).toEqual(['folded']);
    expect([j.check.status, j.check.passed, j.check.skipped.reason]).toEqual(['skipped', false, 'wide-integers']);
    expect(j.check.skipped.message).toMatch(/'key'/);
    const key = j.check.outputs.find((o: { name: string }) => o.name === 'key');
    expect([key.status, key.passed]).toEqual(['wide-integers', false]);
    expect(j.check.outputs.find((o: { name: string }) => o.name === 'y').passed).toBe(true);
    expect(pleat(['fold', m, '-o', out]).stdout).toMatch(/whole-model check: skipped \(wide-integers\)/);
    const x = parseJunit(pleat(['fold', m, '-o', out, '--format', 'junit']).stdout);
    const cases = x.testsuites.testsuite[0].testcase as Array<{ '@name': string; skipped?: { '@message': string } }>;
    expect(cases.find((k) => k['@name'] === 'check output key')?.skipped?.['@message']).toMatch(/^wide-integers: /);
    expect(pleat(['fold', m, '-o', out, '--strict']).code).toBe(1);
    const c = pleat(['compare', m, m, '--json']);
    expect(c.code).toBe(0);
    const cj = json(c.stdout);
    expect(schemaValidator()(cj)).toBe(true);
    expect([cj.status, cj.passed, cj.skipped.reason]).toEqual(['skipped', false, 'wide-integers']);
    expect(pleat(['compare', m, m, '--strict']).code).toBe(1);
    const e = pleat(['evaluate', m, '--save', join(dir, 'wide-saved')]);
    expect(e.code).toBe(2);
    expect(e.stderr.trim().split('\n')).toHaveLength(1);
    expect(e.stderr).toMatch(/^pleat: output 'key' holds \d+ \(element 0\), at or beyond 2\^53/);
    expect(existsSync(join(dir, 'wide-saved', 'outputs.json'))).toBe(false);
    // an input file beyond 2^53: refused before anything runs, one line naming the input and the exact value
    const ids = save('ids.npy', npyInt64([2], BigInt64Array.from([3n, 2n ** 62n + 1n])));
    for (const cmd of [['evaluate', m, '--save', join(dir, 'wide-saved')], ['compare', m, m], ['fold', m, '-o', out]]) {
      const f = pleat([...cmd, '--input', `ids=${ids}`]);
      expect(f.code, cmd[0]).toBe(2);
      expect(f.stderr, cmd[0]).toBe(`pleat: input 'ids': ${ids} holds ${(2n ** 62n + 1n).toString()} (element 1), beyond 2^53 = 9007199254740992; pleat's evaluator holds integers in float64, which would round it\n`);
    }
  });

  it('a probe shape the original cannot run (symbolic H, W took size 1 under a 3x3 Conv): the original is named, with --dim', () => {
    // BatchNormalization -> Conv folds into the Conv, which then comes first in the folded model and so meets the
    // 1x1 probe before the original's does (the two run node by node together)
    const g = new GraphBuilder();
    g.input('x', ['N', 3, 'H', 'W']).output('y');
    const r = rng(9);
    g.init('s', [3], uniform(r, 3, 0.5, 1.5)); g.init('t', [3], randn(r, 3)); g.init('m', [3], randn(r, 3)); g.init('v', [3], uniform(r, 3, 0.5, 2));
    const n = g.node('BatchNormalization', ['x', 's', 't', 'm', 'v'], {}, { name: 'bn' });
    g.init('w', [4, 3, 3, 3], randn(r, 108, 0.3));
    g.node('Conv', [n, 'w'], {}, { name: 'conv', outputs: ['y'] });
    const m = save('small-probe.onnx', modelBytes(g));
    const out = join(dir, 'small-probe-folded.onnx');
    const f = pleat(['fold', m, '-o', out]);
    expect(f.code).toBe(2);
    expect(f.stderr).toMatch(/^pleat: the original model \(small-probe\.onnx\), float64 run: node 'conv' \(Conv\): input spatial size 1 is too small for kernel 3/);
    expect(f.stderr).toContain('--dim H=<size>');
    expect(f.stderr).not.toMatch(/folded model/);
    expect(existsSync(out)).toBe(false);
    expect(pleat(['fold', m, '-o', out, '--dim', 'H=5', '--dim', 'W=4']).code).toBe(0);
  });

  it('--strict: a skipped check exits 1 and writes nothing; strict in the config file does the same', () => {
    const m = noKernelModel();
    const out = join(dir, 'strict.onnx');
    const r = pleat(['fold', m, '-o', out, '--strict', '--json']);
    expect(r.code).toBe(1);
    expect(existsSync(out)).toBe(false);
    const j = json(r.stdout);
    expect(j.failed).toBe(true);
    expect(j.output).toBeNull();
    expect(j.check.status).toBe('skipped');
    const cfgDir = mkdtempSync(join(tmpdir(), 'pleat-strict-cfg-'));
    writeFileSync(join(cfgDir, 'pleat.config.json'), JSON.stringify({ strict: true }));
    const c = pleat(['fold', m, '-o', out], { cwd: cfgDir });
    expect(c.code).toBe(1);
    expect(existsSync(out)).toBe(false);
    expect(c.stdout).toMatch(/--strict/);
    // the same model with a passing check is unaffected by --strict
    const ok = pleat(['fold', SORTER, '-o', join(dir, 'strict-ok.onnx'), '--strict']);
    expect(ok.code).toBe(0);
    // --strict needs the check that --unproven leaves out
    const u = pleat(['fold', SORTER, '-o', join(dir, 'u.onnx'), '--strict', '--unproven']);
    expect(u.code).toBe(2);
    expect(u.stderr).toMatch(/--strict .*--unproven/);
    // compare: skipped is exit 0 without --strict, exit 1 with it
    const e = emptyOutputModel();
    expect(pleat(['compare', e, e, '--strict']).code).toBe(1);
  });

  it('export --strict: a skipped check exits 1 and writes no bundle; without it the bundle ships and the report says skipped', () => {
    const m = noKernelModel();
    const strictDir = join(dir, 'bundle-strict');
    const r = pleat(['export', m, '--bundle', strictDir, '--strict', '--json']);
    expect(r.code).toBe(1);
    expect(existsSync(strictDir)).toBe(false);
    const j = json(r.stdout);
    expect(j.bundle).toBeNull();
    expect(j.fold.check.status).toBe('skipped');
    const loose = join(dir, 'bundle-loose');
    const l = pleat(['export', m, '--bundle', loose, '--json']);
    expect(l.code).toBe(0);
    expect(json(l.stdout).fold.check.status).toBe('skipped');
    expect(existsSync(join(loose, 'manifest.json'))).toBe(true);
  });
});
