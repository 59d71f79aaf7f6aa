// Threads that work beside the main thread (the original model's check runs, the quantization report) lower
// their own scheduling priority, so that when the machine has no core to spare the main thread and its matrix
// product workers (whose chunks the main thread waits for) run first and the background fills the gaps: those
// threads' results are needed only at the end. Linux only (a thread's nice value, by its thread id); elsewhere,
// and wherever the change is refused, nothing happens.
import { existsSync, readlinkSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { getPriority, setPriority } from 'node:os';
import { MessageChannel, receiveMessageOnPort, Worker, type MessagePort } from 'node:worker_threads';

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

/**
 * The URL of a thread's module `file`, beside the module whose import.meta.url is `from` once built; tests that run
 * the TypeScript sources get the built copy in dist/ (`room`: the module's folder under src/).
 */
export function threadModuleUrl(from: string, room: string, file: string): URL {
  const here = new URL(`./${file}`, from);
  if (existsSync(fileURLToPath(here))) return here;
  return new URL(`../../dist/src/${room}/${file}`, from);
}

/**
 * Wait until `state[at]` leaves 0. At 1 the other thread posted a message on `port` just before setting it: take
 * it (a message can take a moment to reach this side of the channel). Undefined at any other value (the other
 * side failed, or none comes) or when nothing arrives within about a second.
 */
export function takePosted(state: Int32Array, at: number, port: MessagePort): unknown {
  while (Atomics.load(state, at) === 0) Atomics.wait(state, at, 0, 1000);
  if (Atomics.load(state, at) !== 1) return undefined;
  for (let tries = 0; tries < 1000; tries++) {
    const m = receiveMessageOnPort(port);
    if (m) return m.message;
    Atomics.wait(state, at, 1, 1); // a 1 ms pause (state[at] stays 1)
  }
  return undefined;
}
