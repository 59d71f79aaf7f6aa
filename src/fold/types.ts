// Public shapes of the folding engine: options, audit findings and the fold ledger. Status, direction and
// reason names come from shared/VOCABULARY.md.
import type { Graph, Node } from '../graph/ir.js';

export type ReasonCode =
  | 'shared-output'
  | 'graph-output'
  | 'params-not-constant'
  | 'overridable-weights'
  | 'training-mode'
  | 'per-activation-stats'
  | 'axis-mismatch'
  | 'nonlinear-between'
  | 'padded-consumer'
  | 'no-linear-neighbour'
  | 'quantized-weights'
  | 'dtype-unsupported'
  | 'storage-overflow'
  | 'non-finite-params'
  | 'runtime-statistics'
  | 'kept-by-user'
  | 'proof-failed';

export type Direction = 'into-producer' | 'into-consumer';

/**
 * What an entry is: a normalization (a normalization operator, its written-out form, or a per-channel
 * scale-and-shift by a constant vector) or another constant affine step (a scalar Mul/Add/Sub/Div, e.g. inside
 * an activation), which is folded when it can be but never listed as kept.
 */
export type EntryKind = 'normalization' | 'affine-step';

/** What the numeric proof of one fold is given: the fold's region of the graph before and after the edit. */
export interface ProofCase {
  /**
   * A small standalone graph: the nodes the fold replaces, the constants they read as initializers, the
   * activations they read as inputs (with element type and shape where the model declares them), and the
   * value(s) the rest of the model reads from the region as outputs.
   */
  before: Graph;
  /** The same region after the fold, with the same inputs and outputs. */
  after: Graph;
  /** Opset version the model imports for a domain ('' is the default ONNX domain). */
  opsetOf: (domain: string) => number;
  /** The normalization nodes the fold removes (ledger names) and the layer it folds into. */
  nodes: string[];
  target: string;
  direction: Direction;
  /** Graph path, e.g. 'main' or 'main/if_3.then_branch'. */
  graph: string;
}

export interface FoldOptions {
  /** Node names to leave in place (--keep NODE). */
  keep?: string[];
  /** Where each keep name came from when not from --keep (e.g. a config file), for the kept-by-user hint. */
  keepOrigins?: Record<string, string>;
  /** Fold weights and parameters that are also graph inputs (callers may replace them at run time). */
  allowOverridable?: boolean;
  /**
   * Numeric proof of each fold; a false (or not passed) result reverts that fold and keeps the norm with reason
   * proof-failed. The figures of a passed proof go on the fold's ledger entries.
   */
  prove?: (c: ProofCase) => boolean | { passed: boolean; proof?: ProofFigures };
  /**
   * Write folded weights over their old bytes when nobody else reads the tensor (default true). This keeps
   * memory near the file size, and changes the buffer the model was parsed from: parse a private copy.
   */
  reuseBuffers?: boolean;
  /**
   * Let the storage range check of float32 weights still on disk ride on their scaling (one read instead of
   * two). A scaling that then finds a value out of range throws LateRangeCheckFailed: only for callers that can
   * start again from the file with this off (the fold job does).
   */
  lateRangeCheck?: boolean;
  /**
   * Fold a normalization into a producer whose output has other readers by giving the norm path its own copy
   * of the layer (--clone-shared); the other readers keep the original.
   */
  cloneShared?: boolean;
  /** Shapes of the model's inputs (given, or the probe's defaults) for shape inference where value_info is missing. */
  inputShapes?: Map<string, number[]>;
}

/** One normalization as audit sees it. */
export interface Finding {
  node: string;
  op: string;
  kind: EntryKind;
  status: 'foldable' | 'kept';
  direction: Direction | null;
  /** The layer it folds into; several readers are listed joined by ', ' (each is in `targets`). */
  target: string | null;
  /** Every layer it folds into (several when its output has several readers). */
  targets: string[];
  /** Weight bytes a --clone-shared copy of the layer adds (0 when nothing is cloned). */
  cloneBytes: number;
  reason: ReasonCode | null;
  /** For a kept norm, one line on what would make it foldable (null for a foldable one). */
  hint: string | null;
  /** For a foldable norm, what the fold does to its layer (null for a kept one). */
  effect: string | null;
  graph: string;
}

/** What the numeric proof of one fold measured on its region, in float64. */
export interface ProofFigures {
  /** Largest |after - before| over the region's outputs and probes. */
  maxAbs: number;
  /** Largest relative error (the metric `maxRel`: |after - before| / max(|before|, floor)). */
  maxRel: number;
  /** The probe shape of the region's (first) input. */
  shape: number[];
}

/** A node the folds changed (a layer whose weights were rescaled) or created, in the folded model. */
export interface RewrittenNode {
  node: Node;
  /** Ledger name of the node. */
  label: string;
  /** Graph path, e.g. 'main' or 'main/if_3.then_branch'. */
  graph: string;
}

/** One normalization as fold left it. */
export interface LedgerEntry {
  node: string;
  op: string;
  kind: EntryKind;
  status: 'folded' | 'kept';
  direction: Direction | null;
  target: string | null;
  targets: string[];
  cloneBytes: number;
  reason: ReasonCode | null;
  /** For a kept norm, one line on what would make it foldable (null for a folded one). */
  hint: string | null;
  /** For a folded norm, what the fold did to its layer (null for a kept one). */
  effect: string | null;
  graph: string;
  /**
   * With --clone-shared, the copy of `target` the fold made and rewrote (its name in the folded model); the
   * original keeps its weights for its other readers. Absent when `target` itself was rewritten.
   */
  copy?: string;
  /** The figures of this fold's proof (folded entries, when proofs ran). */
  proof?: ProofFigures;
}

export interface FoldLedger {
  normalizations: LedgerEntry[];
  nodesBefore: number;
  nodesAfter: number;
  /** Bytes of initializer and Constant-node tensor data, subgraphs included. */
  bytesBefore: number;
  bytesAfter: number;
}
