// Where a folded model came from, recorded in its metadata_props so the file itself says it: pleat's version,
// the SHA-256 of the source file, the check's gate, seed and status. No time stamp, so the same input and flags
// give the same bytes.
import { closeSync, openSync, readSync } from 'node:fs';
import { createHash } from 'node:crypto';
import type { Model } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import { pleatVersion } from './version.js';
import type { FoldJobOptions } from './types.js';

/** Keys pleat writes; an earlier fold's entries under these keys are replaced, everything else is kept. */
export const PROVENANCE_KEYS = ['pleat.version', 'pleat.source.sha256', 'pleat.check.status', 'pleat.check.gate', 'pleat.check.seed'] as const;

/** SHA-256 of a file, read in pieces so a large model is never held twice. */
export function sha256File(path: string): string {
  const h = createHash('sha256');
  const buf = new Uint8Array(1 << 20);
  let fd: number;
  try {
    fd = openSync(path, 'r');
  } catch (e) {
    throw new PleatError('bad-input', `${path}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  try {
    for (;;) {
      const n = readSync(fd, buf, 0, buf.length, null);
      if (n === 0) break;
      h.update(buf.subarray(0, n));
    }
  } finally {
    closeSync(fd);
  }
  return h.digest('hex');
}

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
