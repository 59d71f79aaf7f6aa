// Matrix products split across worker threads that share memory. The calling thread copies the operands into
// SharedArrayBuffers, each worker computes a band of output rows with the same kernel the calling thread uses
// (src/eval/gemm.ts), and the calling thread takes a band itself, then waits for the rest. Every output element
// is one sum over k in the same order whoever computes it, so results are bit-identical for any thread count.
import { Worker } from 'node:worker_threads';
import { existsSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { availableParallelism } from 'node:os';
import type { NumArray } from './value.js';

let wanted = Math.max(1, availableParallelism());

/** Threads for Conv, Gemm and MatMul (--threads); 1 computes everything on the calling thread. */
export function setThreads(n: number): void {
  if (!Number.isInteger(n) || n < 1) throw new RangeError(`threads must be a whole number of at least 1, got ${n}`);
  wanted = n;
}

export function threadCount(): number { return wanted; }

/** How long a band may take without any band finishing before the wait gives up (a dead worker). */
const STALL_MS = 10 * 60_000;

/** Products smaller than this many multiply-adds stay on the calling thread (a hand-off costs about 0.1 ms). */
export const PARALLEL_MIN_WORK = 1 << 22;

export interface BandJob {
  f64: boolean;
  M: number; N: number; K: number;
  a: SharedArrayBuffer; b: SharedArrayBuffer; c: SharedArrayBuffer;
  /** Rows [i0, i1) of C to compute. */
  i0: number; i1: number;
  done: SharedArrayBuffer;
}

let workers: Worker[] = [];
let posted = 0;

/** Bands handed to worker threads so far (tests check the threads really ran). */
export function bandsPosted(): number { return posted; }

function workerUrl(): URL {
  // beside this file once built; tests that run the TypeScript sources use the built copy
  const here = new URL('./gemm-worker.js', import.meta.url);
  if (existsSync(fileURLToPath(here))) return here;
  return new URL('../../dist/src/eval/gemm-worker.js', import.meta.url);
}

function pool(n: number): Worker[] {
  while (workers.length < n) {
    const w = new Worker(workerUrl());
    w.unref(); // idle workers never keep the process alive
    workers.push(w);
  }
  return workers.slice(0, n);
}

/** Stop the worker threads (they are started again when needed). */
export async function stopThreads(): Promise<void> {
  const ws = workers;
  workers = [];
  await Promise.all(ws.map((w) => w.terminate()));
}

interface Shared { buf: SharedArrayBuffer; f32: Float32Array; f64: Float64Array }
const shared: Record<'a' | 'b' | 'c', Shared | undefined> = { a: undefined, b: undefined, c: undefined };

/** A shared array of at least n elements of the given width, reused across calls (calls never overlap). */
export function sharedArray(role: 'a' | 'b' | 'c', n: number, f64: boolean): Float32Array | Float64Array {
  const bytes = n * 8;
  let s = shared[role];
  if (!s || s.buf.byteLength < bytes) {
    const buf = new SharedArrayBuffer(Math.max(bytes, 1 << 16));
    s = { buf, f32: new Float32Array(buf), f64: new Float64Array(buf) };
    shared[role] = s;
  }
  return f64 ? s.f64.subarray(0, n) : s.f32.subarray(0, n);
}

/**
 * Compute C rows in bands: `own(i0, i1)` computes a band on this thread; bands [i0, i1) for the workers go out
 * as jobs over the shared operands. Bands start at multiples of 4 rows (the kernel's tile height).
 */
export function inBands(M: number, threads: number, job: Omit<BandJob, 'i0' | 'i1' | 'done'>, own: (i0: number, i1: number) => void): void {
  const per = Math.ceil(M / threads / 4) * 4;
  const bands: Array<[number, number]> = [];
  for (let i0 = 0; i0 < M; i0 += per) bands.push([i0, Math.min(M, i0 + per)]);
  const others = bands.slice(1);
  const done = new SharedArrayBuffer(8);
  const flag = new Int32Array(done);
  const ws = pool(others.length);
  others.forEach(([i0, i1], k) => ws[k]!.postMessage({ ...job, i0, i1, done } satisfies BandJob));
  posted += others.length;
  own(bands[0]![0], bands[0]![1]);
  // wait for every worker band (flag[0] counts finished bands, flag[1] counts failures); a worker that died
  // without counting its band (it cannot report while this thread waits) ends the wait after STALL_MS
  let idle = 0;
  for (let seen = Atomics.load(flag, 0); seen < others.length;) {
    if (Atomics.wait(flag, 0, seen, 1000) === 'timed-out') idle += 1000; else idle = 0;
    const now = Atomics.load(flag, 0);
    if (now !== seen) idle = 0;
    seen = now;
    if (idle >= STALL_MS) throw new Error('a matrix-product worker thread stopped answering');
  }
  if (Atomics.load(flag, 1) > 0) throw new Error('a matrix-product worker thread failed');
}

export type { NumArray };
