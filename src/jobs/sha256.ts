// SHA-256 of a file, read in chunks so a large model never sits in memory twice; for a large file, optionally
// worked out on a worker thread while the fold goes on (the digest is the same either way).
import { createHash } from 'node:crypto';
import { closeSync, openSync, readSync, statSync } from 'node:fs';
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

// The worker reads and hashes the file, writes the hex digest after an 8-byte header of the shared buffer and sets
// the flag (1 done, 2 failed; the caller then hashes on its own thread, which reports the error properly).
const WORKER = `
const { workerData } = require('node:worker_threads');
const flag = new Int32Array(workerData.sab, 0, 1);
try {
  const fs = require('node:fs'), h = require('node:crypto').createHash('sha256'), buf = Buffer.allocUnsafe(1 << 20);
  const fd = fs.openSync(workerData.path, 'r');
  try { for (let n; (n = fs.readSync(fd, buf, 0, buf.length, null)) > 0;) h.update(buf.subarray(0, n)); } finally { fs.closeSync(fd); }
  Buffer.from(h.digest('hex'), 'latin1').copy(new Uint8Array(workerData.sab, 8, 64));
  Atomics.store(flag, 0, 1);
} catch { Atomics.store(flag, 0, 2); }
Atomics.notify(flag, 0);
`;

/** Start hashing a file; the returned function gives the hex digest (waiting for it if it is not done yet). */
export function sha256Later(file: string): () => string {
  let size = 0;
  try { size = statSync(file).size; } catch { /* the synchronous hash reports it */ }
  let digest: string | undefined;
  if (size < BACKGROUND_MIN_BYTES) return () => (digest ??= fileSha256(file));
  const sab = new SharedArrayBuffer(8 + 64);
  const flag = new Int32Array(sab, 0, 1);
  let worker: Worker | undefined;
  try {
    worker = new Worker(WORKER, { eval: true, workerData: { path: file, sab } });
    worker.unref();
  } catch { Atomics.store(flag, 0, 2); }
  return () => {
    if (digest !== undefined) return digest;
    while (Atomics.load(flag, 0) === 0) Atomics.wait(flag, 0, 0, 1000);
    digest = Atomics.load(flag, 0) === 1 ? Buffer.from(new Uint8Array(sab, 8, 64)).toString('latin1') : fileSha256(file);
    void worker?.terminate();
    return digest;
  };
}
