// The library API, imported by the package's own name through its exports map (Node's package
// self-reference), as a script in a user's project would: survey, fold, audit, compare, evaluate.
import { describe, expect, it } from 'vitest';
import { spawnSync } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ROOT } from './helpers/cli.js';
import { SCHEMA_VERSION } from '../src/jobs/types.js';

function runScript(code: string): { code: number; stdout: string; stderr: string } {
  const r = spawnSync(process.execPath, ['--input-type=module', '-e', code], { cwd: ROOT, encoding: 'utf8' });
  return { code: r.status ?? -1, stdout: r.stdout, stderr: r.stderr };
}

describe("import { survey, fold, audit, compare, evaluate } from 'pleat'", () => {
  it('runs every function with the same JSON shapes as --json, and throws typed errors', () => {
    const out = mkdtempSync(join(tmpdir(), 'pleat-api-'));
    const r = runScript(`
      import { survey, fold, audit, compare, evaluate, PleatError, isPleatError } from 'pleat';
      const s = survey('models/pump-vibration.onnx');
      const a = audit('models/pump-vibration.onnx');
      const f = fold('models/pump-vibration.onnx', ${JSON.stringify(join(out, 'pv.onnx'))});
      const c = compare('models/pump-vibration.onnx', ${JSON.stringify(join(out, 'pv.onnx'))}, { probes: 2 });
      const e = evaluate(${JSON.stringify(join(out, 'pv.onnx'))}, { precision: 'float32', seed: 3 });
      let err;
      try { survey('models/no-such-model.onnx'); } catch (x) { err = x; }
      console.log(JSON.stringify({
        nodes: s.nodeCount, auditCommand: a.command, foldable: a.foldable, schema: f.schemaVersion,
        folded: f.normalizations.filter((n) => n.status === 'folded').length, written: f.output !== null,
        checkPassed: f.check && f.check.passed, comparePassed: c.passed,
        outputs: [...e.outputs.keys()], dims: e.outputs.get('fault_logits').dims,
        typed: err instanceof PleatError && isPleatError(err), kind: err && err.kind,
      }));
    `);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j).toEqual({
      nodes: 18, auditCommand: 'audit', foldable: 5, schema: SCHEMA_VERSION, folded: 5, written: true, checkPassed: true,
      comparePassed: true, outputs: ['fault_logits'], dims: [1, 3], typed: true, kind: 'bad-input',
    });
  });

  it('exposes TypeScript types for options and reports', () => {
    // The compiled declaration file is what a TypeScript user's editor reads.
    const r = runScript(`
      import { readFileSync } from 'node:fs';
      const d = readFileSync('dist/src/index.d.ts', 'utf8');
      console.log(['FoldReport', 'AuditReport', 'CompareReport', 'FoldJobOptions', 'SurveyReport', 'PleatError'].filter((t) => !d.includes(t)).join(','));
    `);
    expect(r.stdout.trim()).toBe('');
  });
});
