// Fuzz worker thread: runs mutants through the library (read, survey, audit, and for some fold with proofs
// and the whole-model check, half-precision storage, write and read back) and reports each outcome: ok, a
// PleatError (expected: its kind), or anything else (a crash: message and stack).
import { parentPort } from 'node:worker_threads';
import { isPleatError } from '../../src/errors.js';
import { parseModel } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { surveyModel } from '../../src/jobs/survey.js';
import { auditLoaded } from '../../src/jobs/audit.js';
import { foldLoaded } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { mutate } from './mutate.js';

export interface Base { label: string; bytes: Uint8Array; dir: string }
export type Outcome = { seed: number; base: string; what: string[]; result: 'ok' } | { seed: number; base: string; what: string[]; result: 'pleat-error'; kind: string; message: string }
  | { seed: number; base: string; what: string[]; result: 'crash'; message: string; stack: string };

/** What one mutant goes through; `seed` also decides how far (every 8th folds with proofs, others fold unproven). */
export function runMutant(bases: readonly Base[], seed: number): Outcome {
  const base = bases[seed % bases.length]!;
  const { bytes, what } = mutate(base.bytes, seed);
  const label = `${base.label}#${seed}`;
  const read = () => parseModel(Uint8Array.from(bytes), base.dir, label);
  try {
    const model = read();
    surveyModel(model, label);
    auditLoaded(model, label, { namesChecked: true });
    const opts = { dims: { batch: 1 }, namesChecked: true, probes: 1 } as const;
    if (seed % 8 === 0) {
      const folded = read();
      foldLoaded(folded, model, label, opts);
      parseModel(serializeModel(folded), base.dir, `${label} (written)`);
    } else if (seed % 8 === 4) {
      const folded = read();
      foldLoaded(folded, undefined, label, { ...opts, noProofs: true, store: 'float16' });
      parseModel(serializeModel(folded), base.dir, `${label} (written)`);
    } else if (seed % 2 === 1) {
      const folded = read();
      foldLoaded(folded, undefined, label, { ...opts, noProofs: true });
      serializeModel(folded);
    }
    return { seed, base: base.label, what, result: 'ok' };
  } catch (e) {
    if (isPleatError(e)) return { seed, base: base.label, what, result: 'pleat-error', kind: e.kind, message: e.message };
    const err = e instanceof Error ? e : new Error(String(e));
    return { seed, base: base.label, what, result: 'crash', message: err.message.split('\n')[0]!, stack: err.stack ?? '' };
  }
}

parentPort?.on('message', (m: { bases: Base[]; seeds: number[] }) => {
  for (const seed of m.seeds) parentPort!.postMessage(runMutant(m.bases, seed));
  parentPort!.postMessage('done');
});
