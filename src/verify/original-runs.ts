// The original model's side of fold's whole-model check, run on a worker thread (src/verify/original-thread.ts)
// from the input file while the main thread folds, proves and writes: the original model does not depend on the
// fold, so its runs on the seeded probes need not wait for the written file. compare() then runs only the folded
// model and takes the original's outputs from here (CompareOptions.outputsOfA), after checking that the thread's
// probe inputs are this run's bit for bit. Each side's values are the same computation whichever thread runs it,
// and the matrix kernel is bit-identical for any thread count, so the report is the same.
import type { MessagePort } from 'node:worker_threads';
import { startBackgroundThread, takePosted, threadModuleUrl } from '../eval/background.js';
import { statSync } from 'node:fs';
import type { Value } from '../eval/value.js';
import type { RunsElsewhere } from './compare.js';
import type { Model } from '../graph/ir.js';
import { probeMemoryLimit } from '../eval/budget.js';
import { estimateRun } from '../eval/estimate.js';
import { resolveInputs } from './inputs.js';

/** Shared state: [0] 1 once the outputs are posted, 2 when the thread failed. */
const DONE = 0;

/** What the thread is started with. */
export interface OriginalRunsSetup {
  input: string;
  seed: number;
  probes: number;
  shapes: Array<[string, number[]]>;
  dims: Array<[string, number]>;
  maxProbeMemory: number;
  state: SharedArrayBuffer;
  port: MessagePort;
}

/** One probe of the original model as the thread ran it. */
export interface OriginalProbe { inputs: Map<string, Value>; outputs: Map<string, Value> }

/** The runs under way (see RunsElsewhere), and a way to end the thread. */
export interface OriginalRuns extends RunsElsewhere {
  stop(): void;
}

/** Inputs at least this large get the thread (below it, starting a thread costs more than the runs). */
let minBytes = 64 * 1024 * 1024;
/** Change the size from which the original's runs get their thread (tests run it on small models). */
export function setOriginalRunsMinBytes(n: number): void { minBytes = n; }

let started = 0;
/** Threads started so far (tests check the thread really ran). */
export function originalRunsStarted(): number { return started; }

/**
 * Start running `original` (read from `input`) on probes 0..probes-1, seeded as compare seeds them, in float64 on
 * a worker thread. Undefined when the file is small, its probes' values (estimated from the shapes) might need
 * more than a quarter of the probe memory limit, or no thread can start. The thread runs within half the limit,
 * so it and the folded model's runs here together stay about where the two models' runs in lockstep stood.
 */
export function startOriginalRuns(input: string, original: Model, o: { seed: number; probes: number; shapes: ReadonlyMap<string, number[]>; dims: ReadonlyMap<string, number>; maxProbeMemory?: number }): OriginalRuns | undefined {
  let size = 0;
  try { size = statSync(input).size; } catch { return undefined; }
  if (size < minBytes) return undefined;
  const limit = o.maxProbeMemory ?? probeMemoryLimit();
  try {
    const specs = resolveInputs(original.graph, new Map(), o.shapes, o.dims);
    const bytes = estimateRun(original.graph, new Map(specs.map((s) => [s.name, s.dims]))).totalBytes;
    if (!(o.probes * bytes <= limit / 4)) return undefined;
  } catch {
    return undefined; // the check itself reports it
  }
  const state = new Int32Array(new SharedArrayBuffer(4));
  const thread = startBackgroundThread(threadModuleUrl(import.meta.url, 'verify', 'original-thread.js'), (port): OriginalRunsSetup => ({
    input, seed: o.seed, probes: o.probes, shapes: [...o.shapes], dims: [...o.dims], maxProbeMemory: Math.floor(limit / 2),
    state: state.buffer as SharedArrayBuffer, port,
  }));
  if (!thread) return undefined;
  const { worker, port: port1 } = thread;
  started++;
  let result: OriginalProbe[] | undefined;
  let finished = false;
  const stop = () => {
    if (finished) return;
    finished = true;
    port1.close();
    void worker.terminate();
  };
  const wait = () => {
    if (finished) return;
    const posted = takePosted(state, DONE, port1) as Array<{ inputs: Array<[string, Value]>; outputs: Array<[string, Value]> }> | undefined;
    result = posted?.map((r) => ({ inputs: new Map(r.inputs), outputs: new Map(r.outputs) }));
    stop();
  };
  return {
    // (probes the thread runs, unless it has failed already)
    has: (p) => Number.isInteger(p) && p >= 0 && p < o.probes && Atomics.load(state, DONE) !== 2 && (!finished || result !== undefined),
    get: (p) => { wait(); return result?.[p]; },
    stop,
  };
}
