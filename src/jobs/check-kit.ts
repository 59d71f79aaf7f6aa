// The proofs and the whole-model check of a fold need the evaluator and its eighty-odd kernel modules. An
// --unproven fold runs neither, and loading them was about a tenth of a second of its start-up, so fold.ts takes
// them from here instead of importing them. Whoever runs a proven fold loads them first: the library's entry
// point (src/index.ts) and the command line do, by importing `with-checks.ts` (or awaiting loadCheckKit).
import type { compare } from '../verify/compare.js';
import type { proveFold } from '../verify/prove.js';
import type { saveProbeSets } from '../verify/probe-files.js';

export interface CheckKit {
  compare: typeof compare;
  proveFold: typeof proveFold;
  saveProbeSets: typeof saveProbeSets;
}

let kit: CheckKit | undefined;

export function provideCheckKit(k: CheckKit): void {
  kit = k;
}

/** Load the proof and check modules (once). */
export async function loadCheckKit(): Promise<void> {
  if (!kit) await import('./with-checks.js');
}

/** The loaded kit; a proven fold without it is a programming error, not bad input. */
export function checkKit(): CheckKit {
  if (!kit) throw new Error('the proof and check modules are not loaded: import src/jobs/with-checks.js (or await loadCheckKit()) before a proven fold');
  return kit;
}
