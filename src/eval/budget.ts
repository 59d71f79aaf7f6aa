// Bounded evaluation. Every array the evaluator allocates for a value (the pool's takeFloat32/takeFloat64, which
// every kernel allocates through) is checked before it is allocated: its element count must be a whole number
// the machine can hold, and the values alive at once must stay within the probe memory limit. So a small model
// whose ConstantOfShape, Expand, Tile, Resize, Range or Pad asks for 10^12 elements, or a probe shape edited to
// 65536, is refused at its first oversized value instead of running for minutes or exhausting memory.
//
// The default limit is a sixteenth of the machine's memory, at least 256 MiB and at most 1 GiB: a whole-model
// check at batch 1 of the models pleat folds holds a few to a few hundred MiB (each activation once in float64,
// at most a few alive at once), the process also holds the model itself (twice: original and folded), the
// evaluator's buffer pool and the runtime, and a release pipeline often runs several jobs on one machine.
import { totalmem } from 'node:os';
import { PleatError } from '../errors.js';
import type { Node } from '../graph/ir.js';

const MiB = 1024 * 1024;

export const DEFAULT_PROBE_MEMORY = Math.min(1024 * MiB, Math.max(256 * MiB, Math.floor(totalmem() / 16)));

let limit = DEFAULT_PROBE_MEMORY;
let live = 0;
let where = '';
// the node being run, named only when a message needs it (a label per step costs a string per node)
let whereNode: Node | undefined;

export function formatBytes(n: number): string {
  if (n >= 1024 * MiB) return `${(n / (1024 * MiB)).toFixed(1)} GiB`;
  if (n >= MiB) return `${(n / MiB).toFixed(1)} MiB`;
  return `${n} bytes`;
}

/** Run `fn` with this probe memory limit (bytes; undefined: the limit already in force, at first the default). */
export function withProbeMemory<T>(bytes: number | undefined, fn: () => T): T {
  if (bytes !== undefined && (!Number.isSafeInteger(bytes) || bytes <= 0)) {
    throw new PleatError('usage', `--max-probe-memory ${bytes}: give a whole number of bytes above 0`);
  }
  const before = limit;
  limit = bytes ?? limit;
  try {
    return fn();
  } finally {
    limit = before;
  }
}

export function probeMemoryLimit(): number {
  return limit;
}

/** What the evaluator is running, for messages. */
export function evaluating(label: string): void {
  where = label;
  whereNode = undefined;
}

/** The node the evaluator is running, for messages (set by run.ts before each node). */
export function evaluatingNode(node: Node): void {
  whereNode = node;
}

function currentWhere(): string {
  if (whereNode) { where = `node '${whereNode.name || '(unnamed)'}' (${whereNode.opType})`; whereNode = undefined; }
  return where;
}

/** Refuse an allocation of `elements` values of `bytesPer` bytes that is not a valid size or breaks the limit. */
export function checkAllocation(elements: number, bytesPer: number, what?: string): void {
  if (!Number.isSafeInteger(elements) || elements < 0) {
    what ??= currentWhere();
    throw new PleatError('bad-model', `${what || 'evaluation'}: a value of ${elements} elements cannot exist (check the model's shapes, pads and strides)`);
  }
  const bytes = elements * bytesPer;
  if (live + bytes > limit) {
    what ??= currentWhere();
    throw new PleatError('bad-input', `${what || 'evaluation'}: a value of ${elements} elements (${formatBytes(bytes)}, with ${formatBytes(live)} already held) would exceed the probe memory limit of ${formatBytes(limit)}; lower the probe shape (--dim, --shape) or raise --max-probe-memory`);
  }
}

/** Bytes of values alive in the evaluator (run.ts counts each pooled array once while some value holds it). */
export function charge(bytes: number): void { live += bytes; }
export function release(bytes: number): void { live = Math.max(0, live - bytes); }
export function liveBytes(): number { return live; }
export function resetLive(to: number): void { live = to; }
