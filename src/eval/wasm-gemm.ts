// SIMD micro-kernels for the blocked GEMM, as a tiny WebAssembly module assembled here byte by byte (no
// toolchain, no binary blob: the instruction list below is the source). Packed panels live in the module's
// memory; each kernel multiplies a row-major A block, 4 rows at a time, by a B panel packed in tiles of 32 bytes
// of columns, k-major (ldb bytes from one column tile to the next, so both operands are read in order, a cache
// line after another), into a row-major C block, accumulating in registers over the whole k range:
//   f32: 4 x 8 tile, f32x4 lanes (float32 arithmetic, the deployment mode)
//   f64: 4 x 4 tile, f64x2 lanes (float64 arithmetic, the ground-truth mode)
// Returns undefined when the runtime has no WebAssembly SIMD; gemm.ts then uses its scalar path.

import {
  BR_IF, END, F32X4_ADD, F32X4_MUL, F64X2_ADD, F64X2_MUL, F64X2_PROMOTE_LOW_F32X4, I8X16_SHUFFLE, I32_ADD, I32_CONST, I32_LOAD,
  I32_LT_U, I32_MUL, I32_SUB, LOAD32_SPLAT, LOAD64_SPLAT, LOCAL_GET, LOCAL_SET, LOOP, section, simd, sleb, uleb, V128_CONST, V128_LOAD,
  V128_STORE, vec, vectorLoop, VOID, WASM_HEADER, wasmName,
} from '../wasm.js';

export interface SimdKernels {
  memory: WebAssembly.Memory;
  /**
   * Depthwise (single-channel) convolution over a zero-padded plane, one vector of outputs at a time:
   * (inP, outP, wP, tabP, taps, outH, outVecs, rowStep, outRow, biasP), byte offsets and steps. Output vector
   * (oh, v) is bias + sum over taps t (in order) of w[t] * in[inP + oh*rowStep + v*16 + tab[t]], where tab holds
   * one i32 byte offset per tap; strided convolutions lay each input row out as its column phases so that a
   * vector of outputs still reads consecutive elements.
   */
  d32: (inP: number, outP: number, wP: number, tabP: number, taps: number, outH: number, outVecs: number, rowStep: number, outRow: number, biasP: number) => void;
  d64: (inP: number, outP: number, wP: number, tabP: number, taps: number, outH: number, outVecs: number, rowStep: number, outRow: number, biasP: number) => void;
  /**
   * (pa, pb, pc, mTiles, nTiles, kc, ldcBytes, ldbBytes, ldaBytes, add): byte offsets into memory and row/tile
   * strides; with add = 1 each sum starts from the value C holds (a previous block of k) instead of 0.
   */
  k32: (pa: number, pb: number, pc: number, mTiles: number, nTiles: number, kc: number, ldcBytes: number, ldbBytes: number, ldaBytes: number, add: number) => void;
  k64: (pa: number, pb: number, pc: number, mTiles: number, nTiles: number, kc: number, ldcBytes: number, ldbBytes: number, ldaBytes: number, add: number) => void;
  /** (src, dst, groups): widen groups of 4 float32 at byte src to float64 at byte dst (exact). */
  p64: (src: number, dst: number, groups: number) => void;
}

// params: pa 0, pb 1, pc 2, mTiles 3, nTiles 4, kc 5, ldc 6, ldb 7, lda 8, add 9; locals: jt 10, it 11, k 12,
// ap 13, bp 14, cp 15, l2 16, l3 17, acc0..acc7 18..25, b0 26, b1 27, a 28
const PA = 0, PB = 1, PC = 2, MT = 3, NT = 4, KC = 5, LDC = 6, LDB = 7, LDA = 8, ADD = 9, JT = 10, IT = 11, K = 12, AP = 13, BP = 14, CP = 15;
const L2 = 16, L3 = 17, ACC = 18, B0 = 26, B1 = 27, A = 28;
const IF = 0x04, ELSE = 0x05;

function kernelBody(f64: boolean): number[] {
  const es = f64 ? 8 : 4; // element size
  const add = simd(f64 ? F64X2_ADD : F32X4_ADD), mul = simd(f64 ? F64X2_MUL : F32X4_MUL);
  const splat = f64 ? [...simd(LOAD64_SPLAT), 3, 0] : [...simd(LOAD32_SPLAT), 2, 0];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i];
  const c = (v: number) => [I32_CONST, ...sleb(v)];
  const code: number[] = [];
  const emit = (...xs: number[][]) => { for (const x of xs) code.push(...x); };
  emit(get(LDA), get(LDA), [I32_ADD], set(L2), get(L2), get(LDA), [I32_ADD], set(L3));
  emit(c(0), set(JT));
  emit([LOOP, VOID]); // j tiles
  emit(c(0), set(IT));
  emit([LOOP, VOID]); // i tiles
  // A is row-major (lda bytes per row): ap = pa + it * 4 * lda, rows at ap, ap + lda, ap + 2 lda, ap + 3 lda;
  // bp = pb + jt * ldb (B is packed in column tiles of 32 bytes, k-major)
  emit(get(PA), get(IT), c(4), [I32_MUL], get(LDA), [I32_MUL], [I32_ADD], set(AP));
  emit(get(PB), get(JT), get(LDB), [I32_MUL], [I32_ADD], set(BP));
  // cp = pc + it*4*ldc + jt*32
  const cAt = () => emit(get(PC), get(IT), c(4), [I32_MUL], get(LDC), [I32_MUL], [I32_ADD], get(JT), c(32), [I32_MUL], [I32_ADD], set(CP));
  // the sums start from C's values (add: a later block of k, continuing the sums exactly) or from 0
  cAt();
  emit(get(ADD), [IF, VOID]);
  for (let r = 0; r < 4; r++) {
    emit(get(CP), simd(V128_LOAD), [4, ...uleb(0)], set(ACC + 2 * r));
    emit(get(CP), simd(V128_LOAD), [4, ...uleb(16)], set(ACC + 2 * r + 1));
    if (r < 3) emit(get(CP), get(LDC), [I32_ADD], set(CP));
  }
  emit([ELSE]);
  for (let r = 0; r < 8; r++) emit(simd(V128_CONST), new Array(16).fill(0), set(ACC + r));
  emit([END]);
  emit(get(KC), set(K));
  emit([LOOP, VOID]); // k
  emit(get(BP), simd(V128_LOAD), [4, ...uleb(0)], set(B0));
  emit(get(BP), simd(V128_LOAD), [4, ...uleb(16)], set(B1));
  for (let r = 0; r < 4; r++) {
    emit(get(AP), r === 0 ? [] : [...get([0, LDA, L2, L3][r]!), I32_ADD], splat, set(A));
    emit(get(ACC + 2 * r), get(A), get(B0), mul, add, set(ACC + 2 * r));
    emit(get(ACC + 2 * r + 1), get(A), get(B1), mul, add, set(ACC + 2 * r + 1));
  }
  emit(get(AP), c(es), [I32_ADD], set(AP));
  emit(get(BP), c(32), [I32_ADD], set(BP));
  emit(get(K), c(1), [I32_SUB], [0x22, K]); // local.tee k
  emit([BR_IF, 0], [END]);
  cAt();
  for (let r = 0; r < 4; r++) {
    emit(get(CP), get(ACC + 2 * r), simd(V128_STORE), [4, ...uleb(0)]);
    emit(get(CP), get(ACC + 2 * r + 1), simd(V128_STORE), [4, ...uleb(16)]);
    if (r < 3) emit(get(CP), get(LDC), [I32_ADD], set(CP));
  }
  emit(get(IT), c(1), [I32_ADD], [0x22, IT], get(MT), [I32_LT_U], [BR_IF, 0], [END]);
  emit(get(JT), c(1), [I32_ADD], [0x22, JT], get(NT), [I32_LT_U], [BR_IF, 0], [END]);
  emit([END]);
  const locals = vec([[...uleb(8), 0x7f], [...uleb(11), 0x7b]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

// depthwise params: inP 0, outP 1, wP 2, tabP 3, taps 4, outH 5, outVecs 6, rowStep 7, outRow 8, biasP 9;
// locals: oh 10, v 11, t 12, pw 13, pt 14, row 15, acc 16 (v128)
function depthwiseBody(f64: boolean): number[] {
  const es = f64 ? 8 : 4;
  const add = simd(f64 ? F64X2_ADD : F32X4_ADD), mul = simd(f64 ? F64X2_MUL : F32X4_MUL);
  const splat = f64 ? [...simd(LOAD64_SPLAT), 3, 0] : [...simd(LOAD32_SPLAT), 2, 0];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i], tee = (i: number) => [0x22, i];
  const c = (v: number) => [I32_CONST, ...sleb(v)];
  const [IN, OUT, W, TAB, TAPS, OH_N, VN, ROWSTEP, OUTROW, BIAS] = [0, 1, 2, 3, 4, 5, 6, 7, 8, 9];
  const [OH, V, T, PW, PT, ROW, ACC1] = [10, 11, 12, 13, 14, 15, 16];
  const code: number[] = [];
  const emit = (...xs: number[][]) => { for (const x of xs) code.push(...x); };
  emit(c(0), set(OH), [LOOP, VOID]);
  emit(c(0), set(V), [LOOP, VOID]);
  emit(simd(V128_CONST), new Array(16).fill(0), set(ACC1));
  emit(get(W), set(PW), get(TAB), set(PT), get(TAPS), set(T));
  // row = in + oh*rowStep + v*16
  emit(get(IN), get(OH), get(ROWSTEP), [I32_MUL], [I32_ADD], get(V), c(16), [I32_MUL], [I32_ADD], set(ROW));
  emit([LOOP, VOID]);
  // acc = acc + w[t] * in[row + tab[t]]
  emit(get(ACC1), get(PW), splat, get(ROW), get(PT), [I32_LOAD, 2, 0], [I32_ADD], simd(V128_LOAD), [4, 0], mul, add, set(ACC1));
  emit(get(PW), c(es), [I32_ADD], set(PW));
  emit(get(PT), c(4), [I32_ADD], set(PT));
  emit(get(T), c(1), [I32_SUB], tee(T), [BR_IF, 0], [END]);
  // out + oh*outRow + v*16 = acc + bias (the bias added last, as a separate rounding)
  emit(get(OUT), get(OH), get(OUTROW), [I32_MUL], [I32_ADD], get(V), c(16), [I32_MUL], [I32_ADD]);
  emit(get(ACC1), get(BIAS), splat, add, simd(V128_STORE), [4, 0]);
  emit(get(V), c(1), [I32_ADD], tee(V), get(VN), [I32_LT_U], [BR_IF, 0], [END]);
  emit(get(OH), c(1), [I32_ADD], tee(OH), get(OH_N), [I32_LT_U], [BR_IF, 0], [END]);
  emit([END]);
  const locals = vec([[...uleb(6), 0x7f], [...uleb(1), 0x7b]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

// widen params: src 0, dst 1, groups 2; locals: x 3 (v128)
function widenBody(): number[] {
  const [SRC, DST, G, X] = [0, 1, 2, 3];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i];
  const HIGH_TO_LOW = [8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
  const code = [
    ...vectorLoop(SRC, G, [
      ...get(SRC), ...simd(V128_LOAD), 2, 0, ...set(X),
      ...get(DST), ...get(X), ...simd(F64X2_PROMOTE_LOW_F32X4), ...simd(V128_STORE), 3, 0,
      ...get(DST), ...get(X), ...get(X), ...simd(I8X16_SHUFFLE), ...HIGH_TO_LOW, ...simd(F64X2_PROMOTE_LOW_F32X4), ...simd(V128_STORE), 3, 16,
      ...get(DST), I32_CONST, ...sleb(32), I32_ADD, ...set(DST),
    ]),
    END,
  ];
  const locals = vec([[...uleb(1), 0x7b]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

/** Pages (64 KiB) the kernels' memory may grow to: 1 GiB of address space, reserved, not committed. */
export const MAX_PAGES = 16384;

export function moduleBytes(): Uint8Array<ArrayBuffer> {
  const i32 = 0x7f;
  const types = section(1, vec([
    [0x60, ...vec(new Array(10).fill([i32])), ...vec([])],
    [0x60, ...vec(new Array(3).fill([i32])), ...vec([])],
  ]));
  const name = wasmName;
  // the memory is imported, shared (limits flag 3: shared, with a maximum), so every worker thread's instance
  // runs its kernels on the operands the calling thread laid out, with no copy
  const imports = section(2, vec([[...name('e'), ...name('m'), 0x02, 0x03, ...uleb(1), ...uleb(MAX_PAGES)]]));
  const funcs = section(3, vec([[0], [0], [0], [0], [1]]));
  const exports = section(7, vec([
    [...name('k32'), 0x00, 0], [...name('k64'), 0x00, 1], [...name('d32'), 0x00, 2], [...name('d64'), 0x00, 3], [...name('p64'), 0x00, 4],
  ]));
  const code = section(10, vec([kernelBody(false), kernelBody(true), depthwiseBody(false), depthwiseBody(true), widenBody()]));
  return new Uint8Array([...WASM_HEADER, ...types, ...imports, ...funcs, ...exports, ...code]);
}

let compiled: WebAssembly.Module | null | undefined;
let cached: SimdKernels | null | undefined;

/** The kernels running on a given shared memory (a worker thread's instance over the calling thread's memory). */
export function simdKernelsOn(memory: WebAssembly.Memory): SimdKernels | undefined {
  try {
    compiled ??= new WebAssembly.Module(moduleBytes());
    const inst = new WebAssembly.Instance(compiled, { e: { m: memory } });
    const e = inst.exports as unknown as SimdKernels;
    return { memory, k32: e.k32, k64: e.k64, d32: e.d32, d64: e.d64, p64: e.p64 };
  } catch {
    compiled = null;
    return undefined;
  }
}

/** This thread's kernels and their memory (made once); undefined when the runtime has no WebAssembly SIMD. */
export function simdKernels(): SimdKernels | undefined {
  if (cached === undefined) {
    try {
      cached = simdKernelsOn(new WebAssembly.Memory({ initial: 1, maximum: MAX_PAGES, shared: true })) ?? null;
    } catch {
      cached = null;
    }
  }
  return cached ?? undefined;
}

/** A run of the matrix kernel over tiles [t0, t1) of a packed A (4 rows each), against one B panel. */
export interface TileSpan {
  f64: boolean;
  /** Byte offsets in the kernel memory: packed A (tile 0), the B panel, C's row 0. */
  pa: number; pb: number; pc: number;
  nTiles: number; K: number; ldcBytes: number; ldbBytes: number;
  t0: number; t1: number;
  /** Tiles per kernel call (a block of A that stays in cache while the panel's columns pass over it). */
  chunk: number;
  /**
   * -1: A is laid out at pa in the kernel's element type. Else (float64 kernel only) the byte offset of A's rows
   * in float32, not yet widened: each kernel call first widens its own tiles' rows into their place at pa, so the
   * widening is shared among the threads (and the next product with this A finds it done).
   */
  a32: number;
}

/** k per kernel call (runTiles): a block of 4 rows of A and of a B tile in float64 is 8 KiB. */
export const KBLOCK = 256;

/** Compute C's rows for tiles [t0, t1) of a span (the calling thread's band, or a worker's). */
export function runTiles(k: SimdKernels, s: TileSpan): void {
  const kern = s.f64 ? k.k64 : k.k32;
  const es = s.f64 ? 8 : 4;
  for (let t = s.t0; t < s.t1; t += s.chunk) {
    const n = Math.min(s.chunk, s.t1 - t);
    const pa = s.pa + t * 4 * s.K * es;
    if (s.a32 >= 0) k.p64(s.a32 + t * 4 * s.K * 4, pa, n * s.K); // n tiles of 4 rows of K float32: n * K groups of 4
    // k in blocks: the block of the chunk's rows of A and of each B tile stays in cache while the kernel passes
    // over them, and each block's sums go on from C's values (exact), so the result is the unblocked one
    for (let k0 = 0; k0 < s.K; k0 += KBLOCK) {
      kern(pa + k0 * es, s.pb + k0 * 32, s.pc + t * 4 * s.ldcBytes, n, s.nTiles, Math.min(KBLOCK, s.K - k0), s.ldcBytes, s.ldbBytes, s.K * es, k0 > 0 ? 1 : 0);
    }
  }
}

/**
 * Tiles [from, to) of chunk i of a span: chunks of s.chunk tiles over the first three quarters, then chunks a
 * quarter that size, so the thread that finishes first waits at most a small chunk for the others. Every thread
 * maps an index to the same tiles; to <= from once the span is used up.
 */
export function chunkTiles(s: TileSpan, i: number): [number, number] {
  const big = Math.floor((s.t1 - s.t0) * 0.75 / s.chunk), small = Math.max(1, s.chunk >> 2);
  const from = i < big ? s.t0 + i * s.chunk : s.t0 + big * s.chunk + (i - big) * small;
  return [from, Math.min(s.t1, from + (i < big ? s.chunk : small))];
}

/** Take chunks of a span's tiles from a shared counter until none is left, running each (see threads.ts). */
export function runChunks(k: SimdKernels, s: TileSpan, counter: Int32Array): void {
  for (;;) {
    const [t0, t1] = chunkTiles(s, Atomics.add(counter, 0, 1));
    if (t0 >= t1) return;
    runTiles(k, { ...s, t0, t1 });
  }
}
