// Reuse of large result buffers during evaluation. Fresh large typed arrays are expensive where page faults
// are (each new buffer is faulted in page by page), so the evaluator gives a freed intermediate's buffer back
// here and the next kernel asking for the same length gets it, zero-filled, instead of a new one.
//
//   takeFloat32(n, zero?) / takeFloat64(n, zero?) -> an array of length n (pooled when n >= POOL_MIN), zeroed
//                                       unless zero=false (for kernels that write every element)
//   giveBack(arr)                    -> offer an array taken here back for reuse (run.ts does this when the
//                                       last reader of a value has run and nothing else holds its buffer)
//   isPooled(arr)                    -> whether arr came from takeFloat32/64 and has not been given back
//   releasePool()                    -> drop every pooled buffer (memory goes back to the garbage collector)
//   markConstant(arr) / isConstant(arr) -> arrays that never change once made (decoded initializers), so
//                                       kernels may cache data derived from them (gemm's packed weights)
//   markTransient(arr)               -> a large weight decoded for one node only (constant while it lives)
// Kernels allocate through allocFloat (attrs.ts) or these functions; they must not keep a taken array after
// returning it as a result.
import type { NumArray } from './value.js';
import { checkAllocation } from './budget.js';

const POOL_MIN = 4096;
const POOL_MAX_BYTES = 512 * 1024 * 1024;

const free32 = new Map<number, Float32Array[]>();
const free64 = new Map<number, Float64Array[]>();
const handedOut = new WeakSet<NumArray>();
let pooledBytes = 0;

/** A pooled array of length n from `free` (zeroed unless zero=false), or a new one made by `make`. */
function take<T extends NumArray>(free: Map<number, T[]>, n: number, zero: boolean, make: (n: number) => T, bytesPer: number): T {
  checkAllocation(n, bytesPer); // before allocating: a size no machine holds, or beyond the probe memory limit
  if (n < POOL_MIN) return make(n);
  const a = free.get(n)?.pop();
  if (a) { pooledBytes -= a.byteLength; if (zero) a.fill(0); handedOut.add(a); return a; }
  const fresh = make(n);
  handedOut.add(fresh);
  return fresh;
}

export function takeFloat32(n: number, zero = true): Float32Array {
  return take(free32, n, zero, (k) => new Float32Array(k), 4);
}

export function takeFloat64(n: number, zero = true): Float64Array {
  return take(free64, n, zero, (k) => new Float64Array(k), 8);
}

export function isPooled(a: NumArray): boolean {
  return handedOut.has(a);
}

export function giveBack(a: NumArray): void {
  if (!handedOut.has(a)) return;
  handedOut.delete(a);
  if (pooledBytes + a.byteLength > POOL_MAX_BYTES) return;
  pooledBytes += a.byteLength;
  const keep = <T extends NumArray>(free: Map<number, T[]>, x: T) => {
    const list = free.get(x.length) ?? [];
    list.push(x);
    free.set(x.length, list);
  };
  if (a instanceof Float32Array) keep(free32, a); else keep(free64, a);
}

export function releasePool(): void {
  free32.clear();
  free64.clear();
  pooledBytes = 0;
}

const constants = new WeakSet<NumArray>();

export function markConstant(a: NumArray): void { constants.add(a); }

export function isConstant(a: NumArray): boolean { return constants.has(a) || transients.has(a); }

// Large weights decoded for one node and dropped after it: constant while they live (never reused, copied when
// handed out); data derived from them (gemm's packed tiles) lives as long as they do.
const transients = new WeakSet<NumArray>();

export function markTransient(a: NumArray): void { transients.add(a); }

