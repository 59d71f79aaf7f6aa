// Where a folded model came from, recorded in its metadata_props so the file itself says it: pleat's version,
// the SHA-256 of the source file (and of its side files, when its weights are in external data), the check's
// gate, seed and status. No time stamp, so the same input and flags give the same bytes.
import { createHash } from 'node:crypto';
import type { Model } from '../graph/ir.js';
import { sideFileLocations } from '../onnx/external.js';
import { pleatVersion } from './version.js';
import { sha256sLater, type Later } from './sha256.js';
import type { FoldJobOptions } from './types.js';

/** The key of the source .onnx file's SHA-256 (that file alone: what `sha256sum model.onnx` prints). */
export const SOURCE_KEY = 'pleat.source.sha256';
/** The key of the side files' digest (see externalDigestText); written only for a source with external data. */
export const EXTERNAL_KEY = 'pleat.source.external.sha256';

/** Keys pleat writes; an earlier fold's entries under these keys are replaced, everything else is kept. */
export const PROVENANCE_KEYS = ['pleat.version', SOURCE_KEY, EXTERNAL_KEY, 'pleat.check.status', 'pleat.check.gate', 'pleat.check.seed'] as const;

/** SHA-256 of a file (src/jobs/sha256.ts). */
export { fileSha256 as sha256File } from './sha256.js';

/**
 * The entries for a fold of a source whose SHA-256 is `sha256`; `status` is the check's (or 'not-run').
 * `externalSha256` (see externalDigestText) is given for a source with external data, and only then recorded,
 * so a source without keeps the entries it always had.
 */
export function provenanceOf(sha256: string, gate: string | undefined, opts: FoldJobOptions, status: string, externalSha256?: string): Array<[string, string]> {
  return [
    ['pleat.version', pleatVersion()],
    [SOURCE_KEY, sha256],
    ...(externalSha256 === undefined ? [] : [[EXTERNAL_KEY, externalSha256] as [string, string]]),
    ['pleat.check.status', status],
    ['pleat.check.gate', gate ?? 'default per output type'],
    ['pleat.check.seed', String(opts.seed ?? 0)],
  ];
}

export function setProvenance(model: Model, entries: ReadonlyArray<[string, string]>): void {
  const ours = new Set<string>(PROVENANCE_KEYS);
  model.metadata = [...model.metadata.filter(([k]) => !ours.has(k)), ...entries];
}

/**
 * The text whose SHA-256 is the side files' digest, as the README documents it so anyone can recompute it with
 * sha256sum: one line per distinct location value, as written in the model, sorted by its UTF-8 bytes (what
 * `LC_ALL=C sort` does), each line the file's SHA-256 in lowercase hex, two spaces, the location and a line feed
 * (the line sha256sum prints for a name without a backslash or a line break).
 */
export function externalDigestText(files: ReadonlyArray<{ location: string; sha256: string }>): string {
  const utf8 = (s: string) => Buffer.from(s, 'utf8');
  const sorted = [...files].sort((a, b) => Buffer.compare(utf8(a.location), utf8(b.location)));
  return sorted.map((f) => `${f.sha256}  ${f.location}\n`).join('');
}

/**
 * Start working out the side files' digest of a model read with its external data (on a thread when they are
 * large, beside the fold); undefined for a model without external data, which records no such entry.
 */
export function externalSha256Later(model: Model): Later<string> | undefined {
  const files = sideFileLocations(model);
  if (files.length === 0) return undefined;
  const digests = sha256sLater(files.map((f) => f.path));
  let value: string | undefined;
  const get = () => (value ??= createHash('sha256')
    .update(externalDigestText(files.map((f, i) => ({ location: f.location, sha256: digests()[i]! }))), 'utf8').digest('hex'));
  return Object.assign(get, { ready: () => value !== undefined || digests.ready(), stop: digests.stop });
}
