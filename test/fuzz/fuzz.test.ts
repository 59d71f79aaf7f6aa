// Seeded mutation fuzz (issue 11): 2,000 mutants of the demo models and of crafted external-data, If and
// float16 models go through the library (read, survey, audit, fold with and without proofs, half-precision
// storage, write and read back) in a worker thread. Every outcome must be success or a PleatError, each
// mutant within its time bound. Same seeds, same mutants: a failure names its seed (rerun it with
// `node dist/test/fuzz/one.js SEED`). The longer campaign is `npm run fuzz`.
import { describe, expect, it } from 'vitest';
import { join } from 'node:path';
import { ROOT } from '../helpers/cli.js';

const MUTANTS = 2000;
const PER_MUTANT_MS = 30_000;

describe('fuzz', () => {
  it(`${MUTANTS} mutants: every outcome is success or a PleatError, each within ${PER_MUTANT_MS / 1000} s`, async () => {
    // the compiled driver (npm test builds first): its worker thread runs compiled code
    const { runCampaign } = await import(join(ROOT, 'dist', 'test', 'fuzz', 'driver.js')) as typeof import('./driver.js');
    const r = await runCampaign(0, MUTANTS, PER_MUTANT_MS);
    const crashes = r.crashes.map((c) => `seed ${c.seed} (${c.base}; ${c.what.join(', ')}): ${c.result === 'crash' ? c.message : ''}`);
    expect(crashes).toEqual([]);
    expect(r.timeouts).toEqual([]);
    expect(r.mutants).toBe(MUTANTS);
    // the mutants must reach past the reader, or the fuzz tests little
    expect(r.ok).toBeGreaterThan(MUTANTS / 5);
    expect(r.pleatErrors['bad-model'] ?? 0).toBeGreaterThan(MUTANTS / 10);
  }, 600_000);

  it('mutants a long campaign found crashing are PleatErrors now (negative input dim, Gemm bias that does not broadcast)', async () => {
    const { buildBases } = await import(join(ROOT, 'dist', 'test', 'fuzz', 'driver.js')) as typeof import('./driver.js');
    const { runMutant } = await import(join(ROOT, 'dist', 'test', 'fuzz', 'worker.js')) as typeof import('./worker.js');
    const bases = buildBases();
    for (const seed of [1002240, 1004196, 1004784]) {
      const r = runMutant(bases, seed);
      expect(r.result, `seed ${seed}: ${'message' in r ? r.message : ''}`).toBe('pleat-error');
      expect(r.result === 'pleat-error' && r.kind).toBe('bad-model');
    }
  }, 120_000);
});
