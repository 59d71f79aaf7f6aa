// A model file read on the thread pool while the command line loads its modules. Loading the argument parser and
// a command's modules takes some 70 ms of the main thread, and reading a 12 MB model some 35 ms (mostly the first
// touch of the buffer's pages): started first, the read runs beside the loading. readSparse takes the bytes over
// only when the file it opened is the one read here, unchanged (same device, inode, size and times); otherwise,
// and for every error, the read proper runs as before and reports what it finds.
import { constants } from 'node:fs';
import { open, stat } from 'node:fs/promises';
import type { Stats } from 'node:fs';
import { resolve } from 'node:path';

interface Prefetched {
  dev: number;
  ino: number;
  size: number;
  mtimeMs: number;
  ctimeMs: number;
  bytes: Uint8Array;
}

const ready = new Map<string, Prefetched>();
const running: Array<Promise<void>> = [];

/** Start reading `path` whole when it is a regular file of at most `maxBytes` (larger files are read sparsely). */
export function prefetchFile(path: string, maxBytes: number): void {
  const key = resolve(path);
  running.push(readWhole(key, maxBytes).then((p) => { if (p) ready.set(key, p); }, () => {}));
}

async function readWhole(path: string, maxBytes: number): Promise<Prefetched | undefined> {
  // only a regular file is opened: opening a FIFO lets a writer waiting in open() through, and closing it then
  // drops what that writer wrote (the read proper refuses a FIFO without opening it)
  const first = await stat(path);
  if (!first.isFile() || first.size === 0 || first.size > maxBytes) return undefined;
  // O_NONBLOCK: a FIFO put at the path since is not waited on
  const fh = await open(path, constants.O_RDONLY | constants.O_NONBLOCK);
  try {
    const st = await fh.stat();
    if (!st.isFile() || st.size === 0 || st.size > maxBytes) return undefined;
    const buf = Buffer.allocUnsafeSlow(st.size);
    for (let at = 0; at < st.size;) {
      const { bytesRead } = await fh.read(buf, at, st.size - at, at);
      if (bytesRead === 0) return undefined; // shorter than its size said: changing under us
      at += bytesRead;
    }
    const after = await fh.stat();
    if (!sameFile(st, after)) return undefined;
    return { dev: st.dev, ino: st.ino, size: st.size, mtimeMs: st.mtimeMs, ctimeMs: st.ctimeMs, bytes: new Uint8Array(buf.buffer, buf.byteOffset, st.size) };
  } finally {
    await fh.close();
  }
}

function sameFile(a: Pick<Stats, 'dev' | 'ino' | 'size' | 'mtimeMs' | 'ctimeMs'>, b: Pick<Stats, 'dev' | 'ino' | 'size' | 'mtimeMs' | 'ctimeMs'>): boolean {
  return a.dev === b.dev && a.ino === b.ino && a.size === b.size && a.mtimeMs === b.mtimeMs && a.ctimeMs === b.ctimeMs;
}

/** Wait until every read started is done (the bytes are then ready to be taken, synchronously). */
export async function prefetchSettled(): Promise<void> {
  await Promise.all(running);
  running.length = 0;
}

/**
 * The bytes read ahead for `path`, when `st` (the file the caller opened) is the file they were read from and it
 * has not changed since; taken once (a second read of the path reads the file again).
 */
export function takePrefetched(path: string, st: Stats): Uint8Array | undefined {
  if (ready.size === 0) return undefined;
  const key = resolve(path);
  const p = ready.get(key);
  if (p === undefined) return undefined;
  ready.delete(key);
  return sameFile(p, st) ? p.bytes : undefined;
}
