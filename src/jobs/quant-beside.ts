// The quantization report of a file fold, worked out on a worker thread beside the main thread's work
// (src/jobs/quant-thread.ts). The thread reads the original model and figures its folded target layers' weights
// while the main thread writes the folded model, then reads the written file back and figures the folded weights
// while the main thread runs the whole-model check. So the report judges the bytes that ship, and its reading and
// arithmetic (a large model's every weight, twice) leave the main thread. The figures are the same computation as
// quantReadiness on the main thread (src/fold/quant.ts: quantBefore, quantAfter), so the rows are identical.
import type { MessagePort } from 'node:worker_threads';
import { startBackgroundThread, takePosted, threadModuleUrl } from '../eval/background.js';
import { statSync } from 'node:fs';
import type { LedgerEntry } from '../fold/types.js';
import type { FoldedTargets, QuantRow } from '../fold/quant.js';

/** Indexes of the shared state: SHIPPED (1 once the folded file is written, 2 when it never will be), DONE (1 rows posted, 2 failed). */
export const SHIPPED = 0, DONE = 1;

/** What the thread is started with. */
export interface QuantThreadSetup {
  input: string;
  ledger: FoldedTargets[];
  thresholdDb: number;
  state: SharedArrayBuffer;
  port: MessagePort;
}

/** Where the folded model was written (the staged file and its side files' temporary names). */
export interface ShippedFile { path: string; redirect: ReadonlyMap<string, string> }

/** The report being worked out on its thread. */
export interface QuantBeside {
  /** The folded model is written: the thread may read it now. */
  shipped(file: ShippedFile): void;
  /** The rows, waiting for them; undefined when the thread failed (the caller then works them out itself). */
  rows(): QuantRow[] | undefined;
  /** End the thread (after rows, or when the job ends early). */
  stop(): void;
}

/** Inputs at least this large get the thread (below it, starting a thread costs more than the figures). */
let minBytes = 64 * 1024 * 1024;

/** Change the size from which the report gets its thread (tests run the thread on small models). */
export function setQuantBesideMinBytes(n: number): void { minBytes = n; }

let started = 0, answered = 0;
/** Threads started so far, and those whose rows were used (tests check the thread really ran). */
export function quantThreadsStarted(): number { return started; }
export function quantThreadsAnswered(): number { return answered; }

/** Start the report's thread for a fold of `input`; undefined when the input is small or no thread can start. */
export function quantBeside(input: string, ledger: readonly LedgerEntry[], thresholdDb: number): QuantBeside | undefined {
  let size = 0;
  try { size = statSync(input).size; } catch { return undefined; }
  if (size < minBytes) return undefined;
  const state = new Int32Array(new SharedArrayBuffer(8));
  const thread = startBackgroundThread(threadModuleUrl(import.meta.url, 'jobs', 'quant-thread.js'), (port): QuantThreadSetup => ({
    input, thresholdDb, state: state.buffer as SharedArrayBuffer, port,
    ledger: ledger.map((e) => ({ node: e.node, status: e.status, target: e.target, targets: e.targets, graph: e.graph, copy: e.copy })),
  }));
  if (!thread) return undefined;
  const { worker, port: port1 } = thread;
  started++;
  let result: QuantRow[] | undefined;
  let finished = false;
  const stop = () => {
    if (finished) return;
    finished = true;
    // a thread still waiting for the file is told none comes (it would end at terminate anyway)
    if (Atomics.load(state, SHIPPED) === 0) { Atomics.store(state, SHIPPED, 2); Atomics.notify(state, SHIPPED); }
    port1.close();
    void worker.terminate();
  };
  return {
    shipped(file) {
      port1.postMessage({ path: file.path, redirect: [...file.redirect] });
      Atomics.store(state, SHIPPED, 1);
      Atomics.notify(state, SHIPPED);
    },
    rows() {
      if (finished) return result;
      result = takePosted(state, DONE, port1) as QuantRow[] | undefined;
      if (result) answered++;
      stop();
      return result;
    },
    stop,
  };
}
