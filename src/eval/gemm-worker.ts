// A worker thread of src/eval/threads.ts: computes bands of C = A * B over shared row-major operands with the
// same kernel as the calling thread, then counts its band done.
import { parentPort } from 'node:worker_threads';
import { gemmBand } from './gemm.js';
import { simdKernels } from './wasm-gemm.js';
import type { BandJob } from './threads.js';

parentPort!.on('message', (job: BandJob) => {
  const flag = new Int32Array(job.done);
  try {
    const view = (buf: SharedArrayBuffer, n: number) => (job.f64 ? new Float64Array(buf, 0, n) : new Float32Array(buf, 0, n));
    const A = view(job.a, job.M * job.K), B = view(job.b, job.K * job.N), C = view(job.c, job.M * job.N);
    const simd = simdKernels();
    if (!simd) throw new Error('no WebAssembly SIMD in this thread');
    gemmBand(simd, job.i0, job.i1, job.N, job.K, A, B, C);
  } catch {
    Atomics.add(flag, 1, 1);
  }
  Atomics.add(flag, 0, 1);
  Atomics.notify(flag, 0);
});
