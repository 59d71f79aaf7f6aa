// Threads that work beside the main thread (the original model's check runs, the quantization report) lower
// their own scheduling priority, so that when the machine has no core to spare the main thread and its matrix
// product workers (whose chunks the main thread waits for) run first and the background fills the gaps: those
// threads' results are needed only at the end. Linux only (a thread's nice value, by its thread id); elsewhere,
// and wherever the change is refused, nothing happens.
import { readlinkSync } from 'node:fs';
import { getPriority, setPriority } from 'node:os';
import { MessageChannel, Worker, type MessagePort } from 'node:worker_threads';

/** How much a background thread raises its nice value (higher is lower priority; raising it needs no privilege). */
export const BACKGROUND_NICE = 10;

/** Lower the calling thread's priority (call it on the background thread itself). */
export function lowerThreadPriority(): void {
  if (process.platform !== 'linux') return;
  try {
    const tid = Number(readlinkSync('/proc/thread-self').split('/').pop());
    if (Number.isInteger(tid) && tid > 0) setPriority(tid, Math.min(19, getPriority(tid) + BACKGROUND_NICE));
  } catch { /* not permitted or not available: run at the usual priority */ }
}

/**
 * Start a background thread running `url`, with `setup(port)` as its workerData and `port` handed over to it; the
 * returned `port` is this side of the channel. The thread never keeps the process alive. Undefined when no thread
 * can start (the caller then does the work itself).
 */
export function startBackgroundThread(url: URL, setup: (port: MessagePort) => object): { worker: Worker; port: MessagePort } | undefined {
  const { port1, port2 } = new MessageChannel();
  try {
    const worker = new Worker(url, { workerData: setup(port2), transferList: [port2] });
    worker.unref();
    return { worker, port: port1 };
  } catch {
    port1.close();
    return undefined;
  }
}
