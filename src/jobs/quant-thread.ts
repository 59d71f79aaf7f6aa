// A worker thread of src/jobs/quant-beside.ts: the quantization report of a file fold. It figures the original
// model's folded target layers, waits for the main thread to say where the folded model is written, reads that
// file back and figures the folded weights, then posts the rows. Any failure is only counted (DONE = 2): the main
// thread then works the report out itself, and reports errors the usual way.
import { workerData } from 'node:worker_threads';
import type { QuantThreadSetup } from './quant-beside.js';

const SHIPPED = 0, DONE = 1; // as in quant-beside.ts (not imported: a failure to load must still be counted)
const setup = workerData as QuantThreadSetup;
const state = new Int32Array(setup.state);
try {
  // loaded here, not at the top, so a module that fails to load is counted as a failure like any other
  const { readModelFile } = await import('../onnx/read.js');
  const { quantAfter, quantBefore } = await import('../fold/quant.js');
  const { lowerThreadPriority, takePosted } = await import('../eval/background.js');
  lowerThreadPriority(); // its results are needed only at the end (src/eval/background.ts)
  const start = quantBefore(readModelFile(setup.input), setup.ledger);
  // where the folded model is written (none comes when the job ends early: then this thread just ends)
  const m = takePosted(state, SHIPPED, setup.port) as { path: string; redirect: Array<[string, string]> } | undefined;
  if (m) {
    const rows = quantAfter(start, readModelFile(m.path, new Map(m.redirect)), setup.thresholdDb);
    setup.port.postMessage(rows);
    Atomics.store(state, DONE, 1);
  } else {
    Atomics.store(state, DONE, 2);
  }
} catch {
  Atomics.store(state, DONE, 2);
}
Atomics.notify(state, DONE);
