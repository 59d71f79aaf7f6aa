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
//   freshFloat32(n) / freshFloat64(n) -> a new zeroed array, from a slab when small, outside the pool (probe
//                                       values, decoded weights)
// Kernels allocate through allocFloat (attrs.ts) or these functions; they must not keep a taken array after
// returning it as a result.
//
// Small arrays (up to SLAB_MAX_BYTES) are views into a shared, fresh (so zeroed) slab, never reused: a typed
// array with its own buffer costs an off-heap allocation and a finalizer for the collector, which on a graph of
// 10^5 small nodes was the larger part of a whole-model check. A view keeps its slab alive, so the slabs are small.
import type { NumArray } from './value.js';
import { checkAllocation } from './budget.js';

const POOL_MIN = 4096;
const POOL_MAX_BYTES = 512 * 1024 * 1024;

const free32 = new Map<number, Float32Array[]>();
const free64 = new Map<number, Float64Array[]>();
const handedOut = new WeakSet<NumArray>();
let pooledBytes = 0;

/** Arrays of more bytes than this (and fewer than 64, which the engine keeps on its heap) get their own buffer. */
const SLAB_MAX_BYTES = 2048;
const SLAB_BYTES = 64 * 1024;
let slab = new ArrayBuffer(0);
let slabUsed = 0;

/** A fresh, zeroed view of `bytes` bytes (a multiple of 8) in the current slab, or undefined when too large. */
function slabView(bytes: number): number | undefined {
  if (bytes <= 64 || bytes > SLAB_MAX_BYTES) return undefined;
  if (slabUsed + bytes > slab.byteLength) { slab = new ArrayBuffer(SLAB_BYTES); slabUsed = 0; }
  const at = slabUsed;
  slabUsed += (bytes + 7) & ~7;
  return at;
}

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

/** A new zeroed array of length k, a slab view when small; not pooled (never handed back, not counted). */
export function freshFloat32(k: number): Float32Array {
  const at = slabView(k * 4);
  return at === undefined ? new Float32Array(k) : new Float32Array(slab, at, k);
}

/** A new zeroed array of length k, a slab view when small; not pooled (never handed back, not counted). */
export function freshFloat64(k: number): Float64Array {
  const at = slabView(k * 8);
  return at === undefined ? new Float64Array(k) : new Float64Array(slab, at, k);
}

export function takeFloat32(n: number, zero = true): Float32Array {
  return take(free32, n, zero, freshFloat32, 4);
}

export function takeFloat64(n: number, zero = true): Float64Array {
  return take(free64, n, zero, freshFloat64, 8);
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

