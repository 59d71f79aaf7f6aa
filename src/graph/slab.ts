// Fresh small byte arrays as views into shared 64 KiB slabs. An array of its own is small enough to live in the
// heap until its first `.buffer` (writing floats asks for it) or, past 64 bytes, gets a buffer outside the heap at
// once, which the garbage collector then tracks one by one: a fold of 10^5 small layers made as many (a bias per
// layer, a re-encoded message per changed tensor and node). A slab is never written again once handed out, so each
// view keeps its bytes; such bytes never own their `.buffer` (use byteOffset and byteLength).
const SLAB = 64 * 1024;
let slab = new ArrayBuffer(0);
let slabAt = 0;

/**
 * `n` fresh zero bytes that no other caller shares, starting at a multiple of `align` (a power of two, at most 8)
 * within the slab; larger requests get an array of their own. (A view made by its constructor: subarray costs twice.)
 */
export function slabBytes(n: number, align = 1): Uint8Array {
  if (n > SLAB / 8) return new Uint8Array(n);
  let at = (slabAt + align - 1) & -align;
  if (at + n > slab.byteLength) { slab = new ArrayBuffer(SLAB); at = 0; }
  slabAt = at + n;
  return new Uint8Array(slab, at, n);
}
