// A worker thread of src/eval/threads.ts: waits on its control block for a kernel span, takes chunks of its tiles
// from the shared counter and runs them on the calling thread's shared kernel memory (the operands are already
// laid out there), then counts itself done.
import { workerData } from 'node:worker_threads';
import { runChunks, simdKernelsOn, type TileSpan } from './wasm-gemm.js';
import { SPAN_FIELDS, type WorkerSetup } from './threads.js';

const setup = workerData as WorkerSetup;
const simd = simdKernelsOn(setup.memory);
const control = new Int32Array(setup.control), done = new Int32Array(setup.done);

// this thread only ever waits for work (Worker.terminate interrupts the wait)
for (let seq = 0; ;) {
  Atomics.wait(control, 0, seq);
  seq = Atomics.load(control, 0);
  const span = {} as Record<(typeof SPAN_FIELDS)[number], number>;
  SPAN_FIELDS.forEach((f, i) => { span[f] = control[1 + i]!; });
  try {
    if (!simd) throw new Error('no WebAssembly SIMD in this thread');
    runChunks(simd, { ...span, f64: span.f64 === 1 } as TileSpan, done.subarray(2, 3));
  } catch {
    Atomics.add(done, 1, 1);
  }
  Atomics.add(done, 0, 1);
  Atomics.notify(done, 0);
}
