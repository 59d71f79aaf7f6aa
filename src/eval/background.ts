// Threads that work beside the main thread (the original model's check runs, the quantization report) lower
// their own scheduling priority, so that when the machine has no core to spare the main thread and its matrix
// product workers (whose chunks the main thread waits for) run first and the background fills the gaps: those
// threads' results are needed only at the end. Linux only (a thread's nice value, by its thread id); elsewhere,
// and wherever the change is refused, nothing happens.
import { readlinkSync } from 'node:fs';
import { getPriority, setPriority } from 'node:os';

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
