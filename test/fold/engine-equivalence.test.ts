// The fold engine keeps one use-def index per graph for the whole run and updates it where each sweep's edits
// landed, instead of rebuilding it per sweep. That must not change any result: for seeded random models (chains,
// branches, fan-out, shared weights and statistics, Constant parameters, If bodies, IR version 3, --keep,
// --clone-shared, proofs that fail and are undone), a 60-block chain and the demo models, the folded model, the
// ledger, the rewritten nodes and audit's findings hash to what the engine gave before the change
// (engine-expected.json, recorded then; PLEAT_WRITE_ENGINE_HASHES=1 records it again), and the written bytes are
// those of the old driver (reference-engine.ts) run in the same test.
import { describe, expect, it } from 'vitest';
import { readFileSync, writeFileSync, existsSync } from 'node:fs';
import { join } from 'node:path';
import { engineCases, runEngineCase } from './engine-cases.js';
import { referenceFoldModel } from './reference-engine.js';

const file = join(import.meta.dirname, 'engine-expected.json');
const cases = engineCases();

describe('fold engine results are those recorded before the incremental index', () => {
  if (process.env.PLEAT_WRITE_ENGINE_HASHES) {
    it('records the expected hashes', { timeout: 600_000 }, () => {
      const out: Record<string, unknown> = {};
      for (const c of cases) {
        const { bytes: _b, ...r } = runEngineCase(c);
        out[c.id] = r;
      }
      writeFileSync(file, `${JSON.stringify(out, null, 1)}\n`);
    });
    return;
  }
  const expected = existsSync(file) ? JSON.parse(readFileSync(file, 'utf8')) as Record<string, unknown> : {};
  for (const c of cases) {
    it(c.id, () => {
      const { bytes, ...r } = runEngineCase(c);
      expect(r).toEqual(expected[c.id]);
      // and the written bytes are those of the driver that rebuilt its index every sweep (same run, same writer)
      const ref = runEngineCase(c, referenceFoldModel);
      expect(Buffer.from(bytes).equals(Buffer.from(ref.bytes))).toBe(true);
    });
  }
});
