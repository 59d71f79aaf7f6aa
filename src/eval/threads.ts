// Matrix products split across worker threads that share memory. Every thread's kernel instance runs on one
// shared WebAssembly memory (src/eval/wasm-gemm.ts): the calling thread lays out the operands once, then it and
// the workers take chunks of 4-row output tiles from a shared counter and compute them in place, and the calling
// thread waits for the workers to finish. Every output element is one sum over k in the same order whoever
// computes it, so results are bit-identical for any thread count.
import { Worker } from 'node:worker_threads';
import { availableParallelism } from 'node:os';
import type { NumArray } from './value.js';
import { simdKernels, type TileSpan } from './wasm-gemm.js';
import { threadModuleUrl } from './background.js';

let wanted = Math.max(1, availableParallelism());

/** Threads for Conv, Gemm and MatMul (--threads); 1 computes everything on the calling thread. */
export function setThreads(n: number): void {
  if (!Number.isInteger(n) || n < 1) throw new RangeError(`threads must be a whole number of at least 1, got ${n}`);
  wanted = n;
}

export function threadCount(): number { return wanted; }

/** How long the wait for the workers may go without any finishing before it gives up (a dead worker). */
const STALL_MS = 10 * 60_000;

/** Products smaller than this many multiply-adds stay on the calling thread (a hand-off costs about 0.1 ms). */
export const PARALLEL_MIN_WORK = 1 << 22;

// Hand-off without messages: each worker owns a control block of shared integers ([0] counts the jobs posted to
// it, then the span's fields) and waits on it with Atomics.wait; all take chunks from one shared counter and count
// themselves done in one shared block ([0] finished, [1] failed, [2] the next chunk). A message per product (a
// structured clone, a fresh shared buffer) cost more than a small product's share of work.
export const SPAN_FIELDS = ['f64', 'pa', 'pb', 'pc', 'nTiles', 'K', 'ldcBytes', 'ldbBytes', 't0', 't1', 'chunk', 'a32'] as const;
export const CONTROL_INTS = 1 + SPAN_FIELDS.length;

/** What a worker is started with. */
export interface WorkerSetup { memory: WebAssembly.Memory; control: SharedArrayBuffer; done: SharedArrayBuffer }

const done = new Int32Array(new SharedArrayBuffer(12)); // finished, failed, next chunk

let workers: Array<{ worker: Worker; control: Int32Array }> = [];
let posted = 0;

/** Worker hand-offs so far (tests check the threads really ran). */
export function bandsPosted(): number { return posted; }

const workerUrl = (): URL => threadModuleUrl(import.meta.url, 'eval', 'gemm-worker.js');

function pool(n: number): Array<{ worker: Worker; control: Int32Array }> {
  while (workers.length < n) {
    // each worker instantiates the kernels over this thread's shared memory and waits on its control block
    const control = new SharedArrayBuffer(CONTROL_INTS * 4);
    const setup: WorkerSetup = { memory: simdKernels()!.memory, control, done: done.buffer as SharedArrayBuffer };
    const worker = new Worker(workerUrl(), { workerData: setup });
    worker.unref(); // idle workers never keep the process alive
    workers.push({ worker, control: new Int32Array(control) });
  }
  return workers.slice(0, n);
}

/** Stop the worker threads (they are started again when needed). */
export async function stopThreads(): Promise<void> {
  const ws = workers;
  workers = [];
  await Promise.all(ws.map((w) => w.worker.terminate()));
}

/**
 * Run the tiles of a kernel span on this thread and the worker threads together: each thread takes the next
 * chunk of tiles from a shared counter until none is left (`take`, src/eval/wasm-gemm.ts runChunks), so a thread
 * slowed by other work on the machine simply takes fewer chunks.
 */
export function inBands(span: TileSpan, threads: number, own: (s: TileSpan, counter: Int32Array) => void): void {
  const chunks = Math.ceil((span.t1 - span.t0) / span.chunk);
  const helpers = Math.min(threads, chunks) - 1;
  const ws = pool(helpers);
  Atomics.store(done, 0, 0);
  Atomics.store(done, 1, 0);
  Atomics.store(done, 2, 0);
  for (const w of ws) {
    const c = w.control;
    SPAN_FIELDS.forEach((f, i) => { c[1 + i] = f === 'f64' ? (span.f64 ? 1 : 0) : span[f]; });
    Atomics.add(c, 0, 1); // the fields above are published by this atomic write
    Atomics.notify(c, 0);
  }
  posted += helpers;
  own(span, done.subarray(2, 3));
  const others = ws;
  // wait for every worker; one that died without counting itself done ends the wait after STALL_MS
  let idle = 0;
  for (let seen = Atomics.load(done, 0); seen < others.length;) {
    if (Atomics.wait(done, 0, seen, 1000) === 'timed-out') idle += 1000; else idle = 0;
    const now = Atomics.load(done, 0);
    if (now !== seen) idle = 0;
    seen = now;
    if (idle >= STALL_MS) throw new Error('a matrix-product worker thread stopped answering');
  }
  if (Atomics.load(done, 1) > 0) throw new Error('a matrix-product worker thread failed');
}

export type { NumArray };
