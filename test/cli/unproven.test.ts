// --unproven: the same folded bytes as a proven run (proofs decide nothing when every fold is exact), no proof
// or whole-model check in the report, and a text ledger that says the result still needs comparing.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pleat, ROOT } from '../helpers/cli.js';
import { readModelFile } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';

describe('pleat fold --unproven', () => {
  it('writes what a proven fold writes and reports that nothing was checked', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-unproven-'));
    const model = join(ROOT, 'models', 'tray-sorter.onnx');
    const proven = pleat(['fold', model, '-o', join(dir, 'proven.onnx'), '--json']);
    const fast = pleat(['fold', model, '-o', join(dir, 'fast.onnx'), '--json', '--unproven']);
    expect(proven.code).toBe(0);
    expect(fast.code).toBe(0);
    // the same bytes but for the provenance entry saying whether the check ran
    const meta = (file: string) => readModelFile(join(dir, file)).metadata;
    expect(meta('proven.onnx').find(([k]) => k === 'pleat.check.status')).toEqual(['pleat.check.status', 'passed']);
    expect(meta('fast.onnx').find(([k]) => k === 'pleat.check.status')).toEqual(['pleat.check.status', 'not-run']);
    const withStatus = (file: string, status: string) => {
      const m = readModelFile(join(dir, file));
      m.metadata = m.metadata.map(([k, v]) => [k, k === 'pleat.check.status' ? status : v]);
      return Buffer.from(serializeModel(m));
    };
    expect(withStatus('fast.onnx', 'x').equals(withStatus('proven.onnx', 'x'))).toBe(true);
    const p = JSON.parse(proven.stdout), f = JSON.parse(fast.stdout);
    // the same ledger, less the figures of proofs that did not run
    expect(f.normalizations).toEqual(p.normalizations.map(({ proof: _, ...e }: { proof?: unknown }) => e));
    expect(p.check).not.toBeNull();
    expect(f.check).toBeNull();
    const text = pleat(['fold', model, '-o', join(dir, 'fast2.onnx'), '--unproven']);
    expect(text.stdout).toMatch(/whole-model check: not run: folds unproven; run pleat compare/);
  });
});
