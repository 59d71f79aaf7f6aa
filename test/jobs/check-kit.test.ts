// An --unproven fold runs without the evaluator and its kernels loaded (src/jobs/check-kit.ts); a proven fold
// without them is refused as a programming error, never run without its proofs. Each case runs in its own
// process: which modules are loaded is process state.
import { describe, expect, it } from 'vitest';
import { spawnSync } from 'node:child_process';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ROOT } from '../helpers/cli.js';

const M = join(ROOT, 'models', 'tray-sorter.onnx');
const dist = (p: string) => JSON.stringify(join(ROOT, 'dist', p));

/** Runs an ES module snippet; also reports whether the kernel registry got loaded (via a module load hook). */
function run(code: string): { code: number | null; out: string; err: string } {
  const hook = `data:text/javascript,${encodeURIComponent(
    "export async function load(u, c, n) { if (u.includes('/eval/registry.js')) process.stderr.write('REGISTRY LOADED\\n'); return n(u, c); }")}`;
  const reg = `data:text/javascript,${encodeURIComponent(`import { register } from 'node:module'; register(${JSON.stringify(hook)});`)}`;
  const r = spawnSync(process.execPath, ['--import', reg, '--input-type=module', '-e', code], { encoding: 'utf8' });
  return { code: r.status, out: r.stdout, err: r.stderr };
}

describe('check kit', () => {
  it('an --unproven fold loads no evaluator', () => {
    const out = join(mkdtempSync(join(tmpdir(), 'pleat-kit-')), 'u.onnx');
    const r = run(`const { foldFile } = await import(${dist('src/jobs/fold.js')});
      const rep = foldFile(${JSON.stringify(M)}, ${JSON.stringify(out)}, { noProofs: true });
      console.log(rep.check === null ? 'no check' : 'check');`);
    expect(r.err).not.toMatch(/REGISTRY LOADED/);
    expect(r.out.trim()).toBe('no check');
    expect(r.code).toBe(0);
  });

  it('a proven fold without the check modules throws instead of folding unproven', () => {
    const out = join(mkdtempSync(join(tmpdir(), 'pleat-kit-')), 'p.onnx');
    const r = run(`const { foldFile } = await import(${dist('src/jobs/fold.js')});
      try { foldFile(${JSON.stringify(M)}, ${JSON.stringify(out)}); console.log('folded'); }
      catch (e) { console.log(e.message); }`);
    expect(r.out).toMatch(/proof and check modules are not loaded/);
    expect(r.out).not.toMatch(/folded/);
  });

  it('the library entry point loads them: a proven fold checks', () => {
    const out = join(mkdtempSync(join(tmpdir(), 'pleat-kit-')), 'l.onnx');
    const r = run(`const { fold } = await import(${dist('src/index.js')});
      console.log(fold(${JSON.stringify(M)}, ${JSON.stringify(out)}).check.status);`);
    expect(r.err).toMatch(/REGISTRY LOADED/);
    expect(r.out.trim()).toBe('passed');
  });
});
