// The folding engine's public surface.
export { analyze } from './analyze.js';
export { foldModel } from './fold.js';
export type { Finding, FoldLedger, FoldOptions, LedgerEntry, ProofCase, ReasonCode, Direction, EntryKind } from './types.js';
