// Reading a model without reading its big weights. The file's structure (every message except the payload of
// large raw_data fields) is read into a buffer the size of the file, at the same offsets; large payloads are
// left unread ("pending") and fetched from the file the first time something needs their bytes. Untouched
// memory costs nothing, so a model whose weights are never decoded is loaded and written back almost for free.
//
// Every reader of tensor bytes goes through ensureLoaded (tensorToFloat64 does) and every in-place overwrite
// through markLoaded (encodeStorage does); the writer streams pending ranges straight from the source file.
import { closeSync, constants, fstatSync, openSync, readSync } from 'node:fs';
import { PleatError } from '../errors.js';
import { WireError, WT_LEN, fieldsOf } from './wire.js';
import { setByteBacking } from '../graph/lazy-bytes.js';
import { prefetchFile, takePrefetched } from './prefetch.js';

/** Payloads at least this large are left unread until needed. */
export const DEFER_MIN = 64 * 1024;
/** Below this size a message is read whole, without walking its fields. */
const WHOLE_MAX = 256 * 1024;
/**
 * A file up to this size is read whole, in one call. What sparse reading saves is bounded by the file's size, and
 * reading 16 MiB from the page cache costs a few milliseconds, while walking a graph of 10^5 small messages to find
 * its payloads cost tens (more than the read itself: 85-160 ms against 35-50 ms for a 12 MB graph of 10^5 nodes,
 * measured 2026-12-03). Large files, where whole weights stay on disk, are walked as before.
 */
const WHOLE_FILE_MAX = 16 * 1024 * 1024;
let wholeFileMax = WHOLE_FILE_MAX;

/** Set the size up to which files are read whole; gives back the previous one (tests walk small files with it). */
export function readWholeUpTo(bytes: number): number {
  const was = wholeFileMax;
  wholeFileMax = bytes;
  return was;
}
/**
 * How far ahead of a field header to read in one call: at first, and again after each payload left unread. Each
 * read-ahead that meets no large payload doubles the next one, up to READ_AHEAD_MAX: a graph of 10^5 small nodes
 * took some 200 reads of 64 KiB otherwise (a system call each, more than reading the file whole), while next to
 * large payloads the read-ahead stays short and reads little of what it could have left on disk.
 */
export const READ_AHEAD = 64 * 1024;
export const READ_AHEAD_MAX = 4 * 1024 * 1024;

type Kind = 'model' | 'graph' | 'node' | 'attribute' | 'tensor';

/** Sub-messages worth walking into, by message kind and field number; 'defer' marks a raw byte payload. */
const SCHEMA: Record<Kind, Record<number, Kind | 'defer'>> = {
  model: { 7: 'graph' },
  graph: { 1: 'node', 5: 'tensor' },
  node: { 5: 'attribute' },
  attribute: { 5: 'tensor', 6: 'graph', 10: 'tensor', 11: 'graph' },
  tensor: { 9: 'defer' },
};

export interface LazySource {
  path: string;
  size: number;
  /** Modification time when read: pending bytes are only taken from the file while it is unchanged. */
  mtimeMs: number;
  /** Byte ranges of the buffer not yet read from the file, sorted, non-overlapping. */
  pending: Array<[number, number]>;
  /** Changes to pending ranges, applied when their bytes are finally read (by ensureLoaded or the writer). */
  deferred: Deferred[];
  buffer: ArrayBufferLike;
  byteOffset: number;
}

/**
 * A change to bytes still on disk: `fn(block, offset)` rewrites a block of the view in place, `offset` being the
 * block's position in the view (always a multiple of the view's element size).
 */
export type BlockTransform = (block: Uint8Array, offsetInView: number) => void;

/**
 * A buffer of `bytes` bytes the change works fastest on (e.g. one inside its SIMD kernel's memory), valid until
 * asked again; undefined for none. The writer streams the change's blocks through it (any buffer gives the same bytes).
 */
export type BlockBuffer = (bytes: number) => Uint8Array | undefined;

interface Deferred { start: number; end: number; viewStart: number; fn: BlockTransform; buffer?: BlockBuffer }

const sources = new WeakMap<ArrayBufferLike, LazySource>();

export function lazySourceOf(view: Uint8Array): LazySource | undefined {
  return sources.get(view.buffer);
}

/** Pending parts of a view, as [start, end) offsets into the file. */
export function pendingIn(src: LazySource, view: Uint8Array): Array<[number, number]> {
  const a = view.byteOffset - src.byteOffset, b = a + view.byteLength;
  const out: Array<[number, number]> = [];
  for (const [s, e] of src.pending) {
    if (e <= a) continue;
    if (s >= b) break;
    out.push([Math.max(s, a), Math.min(e, b)]);
  }
  return out;
}

function removeRange(src: LazySource, a: number, b: number): void {
  const next: Array<[number, number]> = [];
  for (const [s, e] of src.pending) {
    if (e <= a || s >= b) { next.push([s, e]); continue; }
    if (s < a) next.push([s, a]);
    if (e > b) next.push([b, e]);
  }
  src.pending = next;
}

/** Whether any of a view's bytes are still on disk. */
export function isOnDisk(view: Uint8Array): boolean {
  const src = sources.get(view.buffer);
  return !!src && pendingIn(src, view).length > 0;
}

/** Open the source file again, refusing one that changed since it was read (its bytes would not match). */
export function reopenSource(src: LazySource): number {
  const fd = openSync(src.path, 'r');
  const st = fstatSync(fd);
  if (st.size !== src.size || st.mtimeMs !== src.mtimeMs) {
    closeSync(fd);
    throw new PleatError('bad-input', `${src.path}: the file changed while pleat was using it; run again`);
  }
  return fd;
}

function loadRange(src: LazySource, a: number, b: number): void {
  const parts = pendingIn(src, new Uint8Array(src.buffer, src.byteOffset + a, b - a));
  if (!parts.length) return;
  const whole = new Uint8Array(src.buffer, src.byteOffset, src.size);
  const fd = reopenSource(src);
  try {
    for (const [s, e] of parts) readFully(fd, whole, s, e, src.path);
  } finally {
    closeSync(fd);
  }
  for (const [s, e] of parts) removeRange(src, s, e);
}

/** Make sure a view's bytes are in memory (reads the pending parts from the file, applying deferred changes). */
export function ensureLoaded(view: Uint8Array): void {
  const src = sources.get(view.buffer);
  if (!src || !src.pending.length) return;
  let a = view.byteOffset - src.byteOffset, b = a + view.byteLength;
  // a deferred change is applied to its whole range at once, so widen to the ranges this view touches
  const hit = src.deferred.filter((d) => d.end > a && d.start < b);
  for (const d of hit) { a = Math.min(a, d.start); b = Math.max(b, d.end); }
  loadRange(src, a, b);
  if (!hit.length) return;
  const whole = new Uint8Array(src.buffer, src.byteOffset, src.size);
  for (const d of hit) d.fn(whole.subarray(d.start, d.end), d.start - d.viewStart);
  src.deferred = src.deferred.filter((d) => !hit.includes(d));
}

/**
 * A view's bytes as they would be loaded (deferred changes applied), without keeping them: bytes still on disk are
 * read into a fresh buffer that the caller may drop (or into `into`, when it has the view's length), so decoding a
 * large weight for one use does not leave it in the file's buffer. Returns the view itself when nothing of it is
 * on disk (then `into` is untouched).
 */
export function peekBytes(view: Uint8Array, into?: Uint8Array): Uint8Array {
  const src = sources.get(view.buffer);
  if (!src || !src.pending.length) return view;
  const a = view.byteOffset - src.byteOffset, b = a + view.byteLength;
  const parts = pendingIn(src, view);
  if (!parts.length) return view;
  // a deferred change covers its whole range at once: one that reaches outside this view is applied the usual way
  const hit = src.deferred.filter((d) => d.end > a && d.start < b);
  if (hit.some((d) => d.start < a || d.end > b)) { ensureLoaded(view); return view; }
  // into a buffer the caller reuses (already in memory: no page faults), or a fresh one
  const out = into?.byteLength === view.byteLength ? into : new Uint8Array(view.byteLength);
  // the parts already in memory (untouched pending pages of the file's buffer are not read, so they stay unmapped)
  let at = a;
  for (const [s, e] of [...parts, [b, b] as [number, number]]) {
    if (s > at) out.set(view.subarray(at - a, s - a), at - a);
    at = e;
  }
  const fd = reopenSource(src);
  try {
    for (const [s, e] of parts) readFully(fd, out, s - a, e - a, src.path, s);
  } finally {
    closeSync(fd);
  }
  for (const d of hit) d.fn(out.subarray(d.start - a, d.end - a), d.start - d.viewStart);
  return out;
}

/** The view's bytes were overwritten in memory: they no longer come from the file (nor do changes deferred on them). */
export function markLoaded(view: Uint8Array): void {
  const src = sources.get(view.buffer);
  if (!src || !src.pending.length) return;
  const a = view.byteOffset - src.byteOffset, b = a + view.byteLength;
  if (src.deferred.some((d) => d.end > a && d.start < b && (d.start < a || d.end > b))) {
    throw new Error('overwrite of part of a range with a deferred change'); // a bug: overwrites are whole tensors
  }
  src.deferred = src.deferred.filter((d) => d.end <= a || d.start >= b);
  removeRange(src, a, b);
}

/**
 * Change a view's bytes without reading them now: the part already in memory is changed at once, the part still
 * on disk when it is read (the writer streams it through a small buffer, so a large weight never has to sit in
 * memory). Returns false when the view is not backed by a sparsely read file (then change it in memory).
 */
export function deferTransform(view: Uint8Array, elementSize: number, fn: BlockTransform, buffer?: BlockBuffer): boolean {
  const src = sources.get(view.buffer);
  if (!src) return false;
  const a = view.byteOffset - src.byteOffset, b = a + view.byteLength;
  if (src.deferred.some((d) => d.end > a && d.start < b)) ensureLoaded(view); // one change at a time per range
  const parts = pendingIn(src, view);
  // Only the simple shape is deferred: an in-memory head (read ahead with the message header) then one pending tail.
  if (parts.length !== 1 || parts[0]![1] !== b) return false;
  let tail = parts[0]![0];
  const aligned = a + Math.ceil((tail - a) / elementSize) * elementSize;
  if (aligned > tail) { loadRange(src, tail, Math.min(aligned, b)); tail = Math.min(aligned, b); }
  const whole = new Uint8Array(src.buffer, src.byteOffset, src.size);
  if (tail > a) fn(whole.subarray(a, tail), 0);
  if (tail < b) src.deferred.push({ start: tail, end: b, viewStart: a, fn, buffer });
  return true;
}

const SCAN_BLOCK = 4 * 1024 * 1024;
let scanScratch: Uint8Array | undefined;

/**
 * Read a view's bytes block by block without keeping them: parts in memory are passed as they are, parts still
 * on disk are read through a small reused buffer. `fn(block, offset)` sees blocks whose offsets are multiples of
 * `elementSize`. Used for checks that only need one look at a large weight.
 */
export function scanView(view: Uint8Array, elementSize: number, fn: (block: Uint8Array, offsetInView: number) => void): void {
  const src = sources.get(view.buffer);
  const a = src ? view.byteOffset - src.byteOffset : 0, b = a + view.byteLength;
  if (!src || src.deferred.some((d) => d.end > a && d.start < b)) { ensureLoaded(view); fn(view, 0); return; }
  const parts = pendingIn(src, view);
  if (!parts.length) { fn(view, 0); return; }
  if (parts.length !== 1 || parts[0]![1] !== b) { ensureLoaded(view); fn(view, 0); return; }
  let tail = parts[0]![0];
  const aligned = a + Math.ceil((tail - a) / elementSize) * elementSize;
  if (aligned > tail) { loadRange(src, tail, Math.min(aligned, b)); tail = Math.min(aligned, b); }
  const whole = new Uint8Array(src.buffer, src.byteOffset, src.size);
  if (tail > a) fn(whole.subarray(a, tail), 0);
  if (tail >= b) return;
  scanScratch ??= new Uint8Array(SCAN_BLOCK);
  const buf = scanScratch;
  const fd = reopenSource(src);
  try {
    for (let pos = tail; pos < b;) {
      const n = Math.min(buf.byteLength, b - pos);
      readFully(fd, buf, 0, n, src.path, pos);
      fn(buf.subarray(0, n), pos - a);
      pos += n;
    }
  } finally {
    closeSync(fd);
  }
}

/** Deferred changes overlapping [start, end) of the buffer, sorted by start. */
export function deferredIn(src: LazySource, start: number, end: number): Array<{ start: number; end: number; apply(block: Uint8Array, at: number): void; buffer?: BlockBuffer }> {
  return src.deferred.filter((d) => d.end > start && d.start < end).sort((x, y) => x.start - y.start)
    .map((d) => ({ start: d.start, end: d.end, apply: (block: Uint8Array, at: number) => d.fn(block, at - d.viewStart), buffer: d.buffer }));
}

/** Read file bytes [filePos, filePos + (end - start)) into buf[start, end) (filePos defaults to start). */
function readFully(fd: number, buf: Uint8Array, start: number, end: number, path: string, filePos = start): void {
  let pos = start;
  while (pos < end) {
    const n = readSync(fd, buf, pos, end - pos, filePos + (pos - start));
    if (n <= 0) throw new PleatError('bad-input', `${path}: the file changed or shrank while being read`);
    pos += n;
  }
}

/**
 * Read a model file sparsely. Returns the buffer (same length as the file); structural bytes are filled,
 * large payloads are pending. Malformed structure is left for the decoder to report: the walk stops
 * descending where the bytes stop making sense and reads the rest plainly.
 */
export function readSparse(path: string, fd: number): Uint8Array {
  const st = fstatSync(fd);
  const { size, mtimeMs } = st;
  if (size <= wholeFileMax) {
    const early = takePrefetched(path, st); // (read on the thread pool while the command line loaded, see prefetch.ts)
    if (early !== undefined) return early;
  }
  const buf = Buffer.allocUnsafeSlow(size);
  const view = new Uint8Array(buf.buffer, buf.byteOffset, size);
  if (size <= wholeFileMax) {
    readFully(fd, view, 0, size, path);
    return view;
  }
  const pending: Array<[number, number]> = [];
  let hi = 0; // everything before hi is read or pending
  let ahead = READ_AHEAD;

  const load = (a: number, b: number) => {
    if (b <= hi) return;
    readFully(fd, view, Math.max(a, hi), hi = Math.min(size, b), path);
  };
  /** Read at least to b, and ahead of it (for field headers: the walk reads a few bytes at a time). */
  const loadAhead = (b: number) => {
    if (b <= hi) return;
    const to = Math.min(size, Math.max(b, hi + ahead));
    readFully(fd, view, hi, to, path);
    hi = to;
    ahead = Math.min(READ_AHEAD_MAX, ahead * 2);
  };
  const defer = (a: number, b: number) => {
    if (b <= hi) return;
    pending.push([Math.max(a, hi), b]);
    hi = b;
    ahead = READ_AHEAD;
  };

  const walk = (kind: Kind, start: number, end: number): void => {
    if (end - start <= WHOLE_MAX) { load(start, end); return; }
    const schema = SCHEMA[kind];
    const f = fieldsOf(view, start, end);
    try {
      for (;;) {
        loadAhead(Math.min(f.at + 20, end)); // a field header fits in 20 bytes
        if (!f.next()) return;
        if (f.wt !== WT_LEN) continue;
        const what = schema[f.no];
        // (a message shorter than DEFER_MIN holds no payload to leave unread: it is read, not walked)
        if (what === undefined || f.vend - f.vstart < DEFER_MIN) load(f.start, f.vend);
        else if (what === 'defer') { load(f.start, f.vstart); defer(f.vstart, f.vend); }
        else { load(f.start, f.vstart); walk(what, f.vstart, f.vend); }
      }
    } catch (e) {
      if (!(e instanceof WireError)) throw e;
      load(f.at, end); // let the decoder find and report the problem
    }
  };
  walk('model', 0, size);
  load(0, size); // anything after a malformed tail
  if (pending.length) sources.set(view.buffer, { path, size, mtimeMs, pending, deferred: [], buffer: view.buffer, byteOffset: view.byteOffset });
  return view;
}

export function openForRead(path: string): number {
  // O_NONBLOCK: a FIFO or device at the path must be refused, not waited on
  const fd = openSync(path, constants.O_RDONLY | constants.O_NONBLOCK);
  if (!fstatSync(fd).isFile()) {
    closeSync(fd);
    throw new PleatError('bad-input', `${path}: not a regular file`);
  }
  return fd;
}

// Tensor decoding in the graph layer reaches the file through these two (src/graph/lazy-bytes.ts).
setByteBacking({ ensureLoaded, markLoaded, peekBytes });

/**
 * Start reading a model file whole on the thread pool, when it is small enough to be read whole (see prefetch.ts):
 * the command line calls it before loading its modules, and waits for prefetchSettled before the job reads.
 */
export function readModelAhead(path: string): void {
  prefetchFile(path, wholeFileMax);
}
