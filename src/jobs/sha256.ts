// SHA-256 of a file, read in chunks so a large model never sits in memory twice; for a large file (or files large
// in all), optionally worked out on a worker thread while the fold goes on (the digest is the same either way).
import { createHash } from 'node:crypto';
import { closeSync, fstatSync, openSync, readSync, statSync, writeSync } from 'node:fs';
import { resolve } from 'node:path';
import { Worker } from 'node:worker_threads';
import { PleatError } from '../errors.js';

export function fileSha256(file: string): string {
  const hash = createHash('sha256');
  const buf = Buffer.allocUnsafe(1 << 20);
  let fd: number;
  try {
    fd = openSync(file, 'r');
  } catch (e) {
    throw new PleatError('bad-input', `${file}: cannot read (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  try {
    for (let n; (n = readSync(fd, buf, 0, buf.length, null)) > 0;) hash.update(buf.subarray(0, n));
  } finally {
    closeSync(fd);
  }
  return hash.digest('hex');
}

/** Files at least this large are hashed on a worker thread (below it, starting the thread costs more than it saves). */
const BACKGROUND_MIN_BYTES = 64 * 1024 * 1024;

// The worker reads and hashes each file in turn and writes its hex digest after an 8-byte header of the shared
// buffer (file i at 8 + 64 i). The flag: 0 until the worker's first statement, 3 while it hashes, then 1 (done) or 2
// (failed, stopped, or never started: the caller then hashes on its own thread, which reports any error properly).
const WORKER = `
const { workerData } = require('node:worker_threads');
const flag = new Int32Array(workerData.sab, 0, 1);
Atomics.compareExchange(flag, 0, 0, 3);
Atomics.notify(flag, 0);
try {
  const fs = require('node:fs'), crypto = require('node:crypto'), buf = Buffer.allocUnsafe(1 << 20);
  workerData.paths.forEach((path, i) => {
    const h = crypto.createHash('sha256'), fd = fs.openSync(path, 'r');
    try { for (let n; (n = fs.readSync(fd, buf, 0, buf.length, null)) > 0;) h.update(buf.subarray(0, n)); } finally { fs.closeSync(fd); }
    Buffer.from(h.digest('hex'), 'latin1').copy(new Uint8Array(workerData.sab, 8 + 64 * i, 64));
  });
  Atomics.store(flag, 0, 1);
} catch { Atomics.store(flag, 0, 2); }
Atomics.notify(flag, 0);
`;

/** A digest worked out beside other work: call it for the hex digest (waiting if need be); `ready` never waits. */
export type LaterDigest = Later<string>;

/** Something worked out beside other work: call it for the value (waiting if need be); `ready` never waits. */
export interface Later<T> {
  (): T;
  /** Whether the digest is known, so that calling for it would not wait. */
  ready(): boolean;
  /** Stop the thread working it out (the digest is not asked for). */
  stop(): void;
}

/** What tells a file apart from a later version of it (device, inode, size, change times), or undefined. */
function identityOf(file: string): string | undefined {
  try {
    const s = statSync(file, { bigint: true });
    return `${s.dev}:${s.ino}:${s.size}:${s.mtimeNs}:${s.ctimeNs}`;
  } catch {
    return undefined;
  }
}

/** Digests started before the job that needs them (startSha256), by absolute path, with the file's identity then. */
const ahead = new Map<string, { identity: string; digest: LaterDigest }>();

/**
 * Start hashing a large file now, before the job that records its digest has loaded its modules or read the
 * model (the command line calls it right after parsing flags): the hash thread then runs beside that work and
 * is done by the time the output is written. sha256Later takes the digest over if the file is unchanged.
 */
export function startSha256(file: string): void {
  const key = resolve(file);
  if (ahead.has(key)) return;
  const identity = identityOf(file);
  const digest = sha256Later(file);
  // a small file is hashed when asked for (nothing runs ahead), and a file that cannot be read is reported then
  if (identity !== undefined && !digest.ready()) ahead.set(key, { identity, digest });
}

/** Drop every digest started ahead (its thread stopped): the run turned out not to need them here. */
export function stopSha256Ahead(): void {
  for (const { digest } of ahead.values()) digest.stop();
  ahead.clear();
}

/**
 * How long a worker may take to run its first statement before the digest is worked out here instead: one that
 * fails to start (its 'error' event cannot arrive while this thread waits) must not leave the job waiting forever.
 */
const START_LIMIT_MS = 5000;

/**
 * Start hashing a file; the returned function gives the hex digest (waiting for it if it is not done yet).
 * `workerSource` is the worker's code (tests give one that never starts).
 */
export function sha256Later(file: string, workerSource = WORKER): LaterDigest {
  const key = resolve(file), early = ahead.get(key);
  if (early) {
    if (early.identity === identityOf(file)) return early.digest;
    ahead.delete(key); // the file changed since: that digest is of another version
  }
  const all = sha256sLater([file], workerSource);
  return Object.assign(() => all()[0]!, { ready: all.ready, stop: all.stop });
}

/**
 * Start hashing files (one after the other, on one thread when they hold BACKGROUND_MIN_BYTES or more in all); the
 * returned function gives their hex digests in the order given, waiting for them if need be.
 */
export function sha256sLater(files: readonly string[], workerSource = WORKER): Later<string[]> {
  let size = 0;
  for (const f of files) {
    try { size += statSync(f).size; } catch { /* the synchronous hash reports it */ }
  }
  let digests: string[] | undefined;
  if (size < BACKGROUND_MIN_BYTES) return Object.assign(() => (digests ??= files.map(fileSha256)), { ready: () => true, stop: () => {} });
  const sab = new SharedArrayBuffer(8 + 64 * files.length);
  const flag = new Int32Array(sab, 0, 1);
  let worker: Worker | undefined;
  const created = performance.now();
  try {
    worker = new Worker(workerSource, { eval: true, workerData: { paths: [...files], sab } });
    worker.unref();
    // a worker that fails to start says so here (when this thread is not waiting): hash here, nothing thrown
    worker.on('error', () => Atomics.compareExchange(flag, 0, 0, 2));
  } catch { Atomics.store(flag, 0, 2); }
  const get = () => {
    if (digests !== undefined) return digests;
    for (let s; (s = Atomics.load(flag, 0)) === 0 || s === 3;) {
      if (s === 0 && performance.now() - created > START_LIMIT_MS) Atomics.compareExchange(flag, 0, 0, 2);
      else Atomics.wait(flag, 0, s, s === 0 ? 100 : 1000);
    }
    digests = Atomics.load(flag, 0) === 1
      ? files.map((_, i) => Buffer.from(new Uint8Array(sab, 8 + 64 * i, 64)).toString('latin1'))
      : files.map(fileSha256);
    void worker?.terminate();
    return digests;
  };
  const settled = () => { const s = Atomics.load(flag, 0); return s === 1 || s === 2; };
  return Object.assign(get, { ready: () => digests !== undefined || settled(), stop: () => {
    void worker?.terminate();
    // digests asked for after all are then worked out on this thread (or taken, if the worker finished first)
    Atomics.compareExchange(flag, 0, 0, 2);
    Atomics.compareExchange(flag, 0, 3, 2);
  } });
}

/**
 * Stands for a digest not known yet where a file is written: as long as a hex digest (64 characters), so the
 * file's bytes around it are those the real digest gives, and it is written over once known (see fillDigest).
 */
export const DIGEST_PLACEHOLDER = '?'.repeat(64);

/** How far from the end of a written model its metadata entries are looked for (they follow the graph). */
const TAIL_BYTES = 1 << 20;
const TAIL_PIECE = 64 * 1024;

/**
 * Write `digest` over the placeholder of a metadata entry `key` in the last MiB of a written file: the entry's
 * encoding (key, then the value's field tag and length, then the placeholder) must occur there exactly once.
 * Returns false, changing nothing, when it does not (the caller then writes the file again with the digest).
 */
export function fillDigest(file: string, key: string, digest: string): boolean {
  if (digest.length !== DIGEST_PLACEHOLDER.length) return false;
  const k = Buffer.from(key, 'utf8');
  if (k.length > 127) return false;
  // StringStringEntryProto: field 1 (key) then field 2 (value), each a length-delimited string
  const entry = Buffer.concat([Buffer.from([0x0a, k.length]), k, Buffer.from([0x12, 64]), Buffer.from(DIGEST_PLACEHOLDER, 'latin1')]);
  const fd = openSync(file, 'r+');
  try {
    const size = fstatSync(fd).size;
    const start = Math.max(0, size - TAIL_BYTES);
    // read through one small buffer, last piece first (a fresh buffer of the whole tail cost more in page faults
    // than the search); each piece reads on into the next by one byte less than an entry, so an entry across a seam
    // is whole in the piece where it starts, and in no other
    const buf = Buffer.allocUnsafe(TAIL_PIECE + entry.length - 1);
    let at = -1;
    for (let hi = size; hi > start; hi -= TAIL_PIECE) {
      const lo = Math.max(start, hi - TAIL_PIECE), end = Math.min(size, hi + entry.length - 1);
      for (let n = 0; n < end - lo;) {
        const got = readSync(fd, buf, n, end - lo - n, lo + n);
        if (got <= 0) return false;
        n += got;
      }
      const piece = buf.subarray(0, end - lo);
      for (let i = piece.indexOf(entry); i >= 0; i = piece.indexOf(entry, i + 1)) {
        if (at >= 0) return false; // twice
        at = lo + i;
      }
    }
    if (at < 0) return false;
    const bytes = Buffer.from(digest, 'latin1');
    const pos = at + entry.length - 64;
    for (let w = 0; w < 64;) w += writeSync(fd, bytes, w, 64 - w, pos + w);
    return true;
  } finally {
    closeSync(fd);
  }
}
