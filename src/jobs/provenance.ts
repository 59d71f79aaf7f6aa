// Where a folded model came from, recorded in its metadata_props so the file itself says it: pleat's version,
// the SHA-256 of the source file, the check's gate, seed and status. No time stamp, so the same input and flags
// give the same bytes.
import type { Model } from '../graph/ir.js';
import { pleatVersion } from './version.js';
import type { FoldJobOptions } from './types.js';

/** Keys pleat writes; an earlier fold's entries under these keys are replaced, everything else is kept. */
export const PROVENANCE_KEYS = ['pleat.version', 'pleat.source.sha256', 'pleat.check.status', 'pleat.check.gate', 'pleat.check.seed'] as const;

/** SHA-256 of a file (src/jobs/sha256.ts). */
export { fileSha256 as sha256File } from './sha256.js';

/** The entries for a fold of a source whose SHA-256 is `sha256`; `status` is the check's (or 'not-run'). */
export function provenanceOf(sha256: string, gate: string | undefined, opts: FoldJobOptions, status: string): Array<[string, string]> {
  return [
    ['pleat.version', pleatVersion()],
    ['pleat.source.sha256', sha256],
    ['pleat.check.status', status],
    ['pleat.check.gate', gate ?? 'default per output type'],
    ['pleat.check.seed', String(opts.seed ?? 0)],
  ];
}

export function setProvenance(model: Model, entries: ReadonlyArray<[string, string]>): void {
  const ours = new Set<string>(PROVENANCE_KEYS);
  model.metadata = [...model.metadata.filter(([k]) => !ours.has(k)), ...entries];
}
