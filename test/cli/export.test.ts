// `pleat export` end to end through the built CLI: the bundle is written after a passing fold, nothing is
// written when the gate fails (exit 1), and --json validates against the shipped schema (ajv). The bundle's
// bytes are checked against the folded model by the bundle tests in test/onnx/.
import { describe, expect, it } from 'vitest';
import { existsSync, mkdtempSync, readdirSync, readFileSync } from 'node:fs';
import { createHash } from 'node:crypto';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pleat, ROOT } from '../helpers/cli.js';
import { schemaValidator } from '../report/helpers.js';
import { exportFile } from '../../src/jobs/export.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-export-cli-'));
const model = join(ROOT, 'models', 'tray-edge.onnx');

describe('pleat export', { timeout: 180_000 }, () => {
  it('safetensors bundle: text report ends with the bundle and the caution', () => {
    const out = join(dir, 'st');
    const r = pleat(['export', model, '--bundle', out]);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(readdirSync(out).sort()).toEqual(['manifest.json', 'weights.safetensors']);
    expect(r.stdout).toMatch(/^fold .* -> bundle /);
    expect(r.stdout).toMatch(/bundle safetensors -> .*: \d+ tensors/);
    const listed = Object.values(JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')).tensors) as Array<{ count: number }>;
    expect(r.stdout).toContain(`  read back: ${listed.length} tensors, ${listed.reduce((a, t) => a + t.count, 0)} elements (`);
    expect(r.stdout).toMatch(/\) compared with the checked model bit for bit: all match\n/);
    expect(r.stdout).toMatch(/^Caution:/m);
  });

  // The bundle says what the folded .onnx says of its fold (source SHA-256, check status, gate, seed): a bundle
  // made after a skipped check looked the same as one made after a passed check.
  it("the manifest and the safetensors metadata record the fold's provenance, the check's status included", () => {
    const out = join(dir, 'prov');
    const made = pleat(['export', model, '--bundle', out, '--seed', '5']);
    expect(made.code, made.stderr).toBe(0);
    const want = {
      'pleat.check.gate': 'default per output type', 'pleat.check.seed': '5', 'pleat.check.status': 'passed',
      'pleat.source.sha256': createHash('sha256').update(readFileSync(model)).digest('hex'), 'pleat.version': JSON.parse(readFileSync(join(ROOT, 'package.json'), 'utf8')).version,
    };
    expect(JSON.parse(readFileSync(join(out, 'manifest.json'), 'utf8')).provenance).toEqual(want);
    const st = readFileSync(join(out, 'weights.safetensors'));
    const n = Number(st.readBigUInt64LE(0));
    expect(JSON.parse(st.subarray(8, 8 + n).toString('utf8')).__metadata__).toMatchObject(want);
    const unproven = join(dir, 'prov-unproven'); // (the library's export without the check)
    expect(exportFile(model, unproven, 'safetensors', { noProofs: true }).bundle).not.toBeNull();
    expect(JSON.parse(readFileSync(join(unproven, 'manifest.json'), 'utf8')).provenance['pleat.check.status']).toBe('not-run');
  });

  it('C bundle with --json, valid against the schema', () => {
    const out = join(dir, 'c');
    const r = pleat(['export', model, '--bundle', out, '--bundle-format', 'c', '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.command).toBe('export');
    expect(j.bundle.format).toBe('c');
    expect(j.bundle.readBack).toMatchObject({ status: 'passed', tensors: j.bundle.tensors, bytes: j.bundle.bytes });
    expect(readdirSync(out).sort()).toEqual(['manifest.json', 'weights.c', 'weights.h']);
    const validate = schemaValidator();
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
  });

  it("a folder holding the other format's bundle file, or a missing parent folder: exit 2, one line, before any work", () => {
    const out = join(dir, 'mixed');
    expect(pleat(['export', model, '--bundle', out]).code).toBe(0);
    const r = pleat(['export', model, '--bundle', out, '--bundle-format', 'c']);
    expect(r.code).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/^pleat: --bundle .*mixed: holds weights\.safetensors, .*use an empty folder or remove weights\.safetensors/);
    expect(readdirSync(out).sort()).toEqual(['manifest.json', 'weights.safetensors']);
    const deep = pleat(['export', model, '--bundle', join(dir, 'no', 'such')]);
    expect(deep.code).toBe(2);
    expect(deep.stderr).toMatch(/the folder .*no does not exist \(pleat creates the bundle folder, not the folders above it\)/);
    expect(existsSync(join(dir, 'no'))).toBe(false);
  });

  it('a failing gate writes no bundle and exits 1; an unknown format is a usage error', () => {
    const out = join(dir, 'never');
    const r = pleat(['export', model, '--bundle', out, '--gate', 'maxAbs < 0']);
    expect(r.code).toBe(1);
    expect(existsSync(join(out, 'manifest.json'))).toBe(false);
    expect(r.stdout).toMatch(/nothing written/);
    expect(pleat(['export', model, '--bundle', out, '--bundle-format', 'zip']).code).toBe(2);
  });

  // PLEAT_TAMPER_BUNDLE (src/ship/read-back.ts) changes a staged file before it is read back, as a defect in a
  // writer would: a bundle that is not the checked model's weights is an internal error, and nothing is written
  it.each(['safetensors', 'c'] as const)('%s: a staged file that differs from the checked model exits 3, one line naming the tensor, and leaves nothing', (format) => {
    const ref = join(dir, `tamper-ref-${format}`);
    expect(pleat(['export', model, '--bundle', ref, '--bundle-format', format]).code).toBe(0);
    const file = format === 'c' ? 'weights.c' : 'weights.safetensors';
    const bytes = readFileSync(join(ref, file));
    const at = format === 'c' ? bytes.indexOf('0x1.') + 4 : bytes.length - 2; // a fraction digit; the last tensor's last element
    const out = join(dir, `tamper-${format}`);
    const r = pleat(['export', model, '--bundle', out, '--bundle-format', format], { env: { PLEAT_TAMPER_BUNDLE: `${file}:${at}` } });
    expect(r.code).toBe(3);
    expect(r.stdout).toBe('');
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(new RegExp(`^pleat: internal error: bundle read back: tensor '[^']+' element \\d+ \\[[\\d, ]*\\] is \\S+ in ${file.replace('.', '\\.')} where the checked model has 0x[0-9a-f]+; nothing was written`));
    expect(existsSync(out)).toBe(false);
    expect(readdirSync(dir).filter((n) => n.startsWith('.pleat-'))).toEqual([]);
    // into the existing bundle: left as it was
    const again = pleat(['export', model, '--bundle', ref, '--bundle-format', format], { env: { PLEAT_TAMPER_BUNDLE: `${file}:${at}` } });
    expect(again.code).toBe(3);
    expect(readFileSync(join(ref, file)).equals(bytes)).toBe(true);
    expect(readdirSync(ref).sort()).toEqual(format === 'c' ? ['manifest.json', 'weights.c', 'weights.h'] : ['manifest.json', 'weights.safetensors']);
  });
});
