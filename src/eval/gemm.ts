// Cache-blocked matrix multiply on typed arrays, used by Gemm, MatMul, Conv (after im2col) and ConvTranspose.
//
//   gemm(M, N, K, A, a, B, b, C, cOff, ldc, accumulate)
//   C[cOff + i*ldc + j] (+)= sum_k A(i,k) * B(k,j)   for i < M, j < N
// where A(i,k) = A.data[a.off + i*a.rs + k*a.cs] and B(k,j) = B.data[b.off + k*b.rs + j*b.cs], so transposed
// and strided operands need no copy by the caller. The blocks of A and B are packed into Float64Array panels
// (4 rows / 4 columns interleaved along k) and a 4x4 register tile accumulates each output block, the usual
// layout for a fast scalar matrix multiply. Sums are in float64; a Float32Array C rounds once per k-block.
import type { NumArray } from './value.js';
import { runChunks, runTiles, simdKernels, type SimdKernels, type TileSpan } from './wasm-gemm.js';
import { inBands, PARALLEL_MIN_WORK, threadCount } from './threads.js';
import { isConstant } from './pool.js';

export interface Operand {
  data: NumArray;
  off: number;
  /** Element stride between rows. */
  rs: number;
  /** Element stride between columns. */
  cs: number;
  /**
   * An operand made on demand (Conv's column matrix): `fill` writes `data` before a path that reads it, and
   * `tiles` lays out columns [j0, j0 + nc) straight in the SIMD kernel's tiles instead (packBTiles' layout).
   */
  fill?: () => void;
  tiles?: (mem: Float32Array | Float64Array, at: number, j0: number, nc: number, nr: number) => void;
}

const MR = 4, NR = 4;
const KC = 256, MC = 128, NC = 1024;

let packA = new Float64Array(MC * KC);
let packB = new Float64Array(KC * NC);

function packAPanel(A: Operand, i0: number, mc: number, k0: number, kc: number): void {
  const need = Math.ceil(mc / MR) * MR * kc;
  if (packA.length < need) packA = new Float64Array(need);
  const d = A.data, rs = A.rs, cs = A.cs;
  let p = 0;
  for (let ir = 0; ir < mc; ir += MR) {
    const rows = Math.min(MR, mc - ir);
    const base = A.off + (i0 + ir) * rs + k0 * cs;
    if (rows === MR) {
      const r0 = base, r1 = base + rs, r2 = base + 2 * rs, r3 = base + 3 * rs;
      for (let k = 0; k < kc; k++) {
        const o = k * cs;
        packA[p] = d[r0 + o]!; packA[p + 1] = d[r1 + o]!; packA[p + 2] = d[r2 + o]!; packA[p + 3] = d[r3 + o]!;
        p += 4;
      }
    } else {
      for (let k = 0; k < kc; k++) {
        for (let r = 0; r < MR; r++) packA[p + r] = r < rows ? d[base + r * rs + k * cs]! : 0;
        p += 4;
      }
    }
  }
}

function packBPanel(B: Operand, k0: number, kc: number, j0: number, nc: number): void {
  const need = Math.ceil(nc / NR) * NR * kc;
  if (packB.length < need) packB = new Float64Array(need);
  const d = B.data, rs = B.rs, cs = B.cs;
  let p = 0;
  for (let jr = 0; jr < nc; jr += NR) {
    const cols = Math.min(NR, nc - jr);
    const base = B.off + k0 * rs + (j0 + jr) * cs;
    if (cols === NR && cs === 1) {
      for (let k = 0; k < kc; k++) {
        const o = base + k * rs;
        packB[p] = d[o]!; packB[p + 1] = d[o + 1]!; packB[p + 2] = d[o + 2]!; packB[p + 3] = d[o + 3]!;
        p += 4;
      }
    } else {
      for (let k = 0; k < kc; k++) {
        const o = base + k * rs;
        for (let c = 0; c < NR; c++) packB[p + c] = c < cols ? d[o + c * cs]! : 0;
        p += 4;
      }
    }
  }
}

/** C (+)= A * B; see the header for the operand layout. */
export function gemm(M: number, N: number, K: number, A: Operand, B: Operand, C: NumArray, cOff: number, ldc: number, accumulate: boolean): void {
  if (M === 0 || N === 0) return;
  if (K === 0) {
    if (!accumulate) for (let i = 0; i < M; i++) C.fill(0, cOff + i * ldc, cOff + i * ldc + N);
    return;
  }
  if (M * N * K < SMALL_WORK) { B.fill?.(); gemmSmall(M, N, K, A, B, C, cOff, ldc, accumulate); return; }
  const simd = useSimd ? simdKernels() : undefined;
  if (simd) {
    if (M === 1 && !(C instanceof Float32Array)) { B.fill?.(); gemv(N, K, A, B, C, cOff, accumulate); return; }
    // very large operands (past the kernel memory's room even in row blocks) stay on the scalar path
    if (gemmSimd(simd, M, N, K, A, B, C, cOff, ldc, accumulate)) return;
  }
  B.fill?.();
  gemmScalar(M, N, K, A, B, C, cOff, ldc, accumulate);
}

/** Products smaller than this many multiply-adds take gemmSmall (packing costs more than the sums). */
export const SMALL_WORK = 512;

/**
 * A small product without packing: the same sums as gemmScalar, element for element (each over k-blocks of KC,
 * each block summed from zero in k order and then stored or added to C), so the result is bit-identical.
 */
export function gemmSmall(M: number, N: number, K: number, A: Operand, B: Operand, C: NumArray, cOff: number, ldc: number, accumulate: boolean): void {
  const ad = A.data, bd = B.data, acs = A.cs, brs = B.rs;
  for (let i = 0; i < M; i++) {
    for (let j = 0; j < N; j++) {
      const o = cOff + i * ldc + j;
      for (let k0 = 0; k0 < K; k0 += KC) {
        const k1 = Math.min(K, k0 + KC);
        let s = 0;
        for (let k = k0, ai = A.off + i * A.rs + k0 * acs, bi = B.off + k0 * brs + j * B.cs; k < k1; k++, ai += acs, bi += brs) s += ad[ai]! * bd[bi]!;
        if (accumulate || k0 > 0) C[o] += s; else C[o] = s;
      }
    }
  }
}

/** The blocked scalar product (4x4 register tiles over packed panels), for runtimes without WebAssembly SIMD. */
export function gemmScalar(M: number, N: number, K: number, A: Operand, B: Operand, C: NumArray, cOff: number, ldc: number, accumulate: boolean): void {
  for (let j0 = 0; j0 < N; j0 += NC) {
    const nc = Math.min(NC, N - j0);
    for (let k0 = 0; k0 < K; k0 += KC) {
      const kc = Math.min(KC, K - k0);
      packBPanel(B, k0, kc, j0, nc);
      const add = accumulate || k0 > 0;
      for (let i0 = 0; i0 < M; i0 += MC) {
        const mc = Math.min(MC, M - i0);
        packAPanel(A, i0, mc, k0, kc);
        macroKernel(mc, nc, kc, C, cOff + i0 * ldc + j0, ldc, add);
      }
    }
  }
}

function macroKernel(mc: number, nc: number, kc: number, C: NumArray, cOff: number, ldc: number, add: boolean): void {
  const pa = packA, pb = packB;
  for (let jr = 0; jr < nc; jr += NR) {
    const cols = Math.min(NR, nc - jr);
    const bBase = (jr / NR) * NR * kc;
    for (let ir = 0; ir < mc; ir += MR) {
      const rows = Math.min(MR, mc - ir);
      let ia = (ir / MR) * MR * kc, ib = bBase;
      let c00 = 0, c01 = 0, c02 = 0, c03 = 0, c10 = 0, c11 = 0, c12 = 0, c13 = 0;
      let c20 = 0, c21 = 0, c22 = 0, c23 = 0, c30 = 0, c31 = 0, c32 = 0, c33 = 0;
      for (let k = 0; k < kc; k++) {
        const a0 = pa[ia]!, a1 = pa[ia + 1]!, a2 = pa[ia + 2]!, a3 = pa[ia + 3]!;
        const b0 = pb[ib]!, b1 = pb[ib + 1]!, b2 = pb[ib + 2]!, b3 = pb[ib + 3]!;
        c00 += a0 * b0; c01 += a0 * b1; c02 += a0 * b2; c03 += a0 * b3;
        c10 += a1 * b0; c11 += a1 * b1; c12 += a1 * b2; c13 += a1 * b3;
        c20 += a2 * b0; c21 += a2 * b1; c22 += a2 * b2; c23 += a2 * b3;
        c30 += a3 * b0; c31 += a3 * b1; c32 += a3 * b2; c33 += a3 * b3;
        ia += 4; ib += 4;
      }
      const o = cOff + ir * ldc + jr;
      if (rows === MR && cols === NR) {
        const o1 = o + ldc, o2 = o1 + ldc, o3 = o2 + ldc;
        if (add) {
          C[o] += c00; C[o + 1] += c01; C[o + 2] += c02; C[o + 3] += c03;
          C[o1] += c10; C[o1 + 1] += c11; C[o1 + 2] += c12; C[o1 + 3] += c13;
          C[o2] += c20; C[o2 + 1] += c21; C[o2 + 2] += c22; C[o2 + 3] += c23;
          C[o3] += c30; C[o3 + 1] += c31; C[o3 + 2] += c32; C[o3 + 3] += c33;
        } else {
          C[o] = c00; C[o + 1] = c01; C[o + 2] = c02; C[o + 3] = c03;
          C[o1] = c10; C[o1 + 1] = c11; C[o1 + 2] = c12; C[o1 + 3] = c13;
          C[o2] = c20; C[o2 + 1] = c21; C[o2 + 2] = c22; C[o2 + 3] = c23;
          C[o3] = c30; C[o3 + 1] = c31; C[o3 + 2] = c32; C[o3 + 3] = c33;
        }
      } else {
        const t = [c00, c01, c02, c03, c10, c11, c12, c13, c20, c21, c22, c23, c30, c31, c32, c33];
        for (let r = 0; r < rows; r++) {
          for (let c = 0; c < cols; c++) {
            const idx = o + r * ldc + c;
            C[idx] = (add ? C[idx]! : 0) + t[r * 4 + c]!;
          }
        }
      }
    }
  }
}

/**
 * One row of A times B (a dense layer on one sample) in float64, each sum taken over k in order from zero: the
 * same arithmetic as the float64 SIMD kernel, without packing B (which for a transposed weight is a strided
 * gather of the whole matrix) or computing a 4-row tile for one row.
 */
function gemv(N: number, K: number, A: Operand, B: Operand, C: NumArray, cOff: number, accumulate: boolean): void {
  const ad = A.data, ao = A.off, acs = A.cs, bd = B.data, bo = B.off, brs = B.rs, bcs = B.cs;
  if (brs === 1) {
    for (let j = 0; j < N; j++) {
      const s = dot(ad, ao, acs, bd, bo + j * bcs, K);
      if (accumulate) C[cOff + j] += s; else C[cOff + j] = s;
    }
    return;
  }
  const row = new Float64Array(N);
  for (let k = 0; k < K; k++) {
    const a = ad[ao + k * acs]!, b = bo + k * brs;
    for (let j = 0; j < N; j++) row[j] += a * bd[b + j * bcs]!;
  }
  for (let j = 0; j < N; j++) { if (accumulate) C[cOff + j] += row[j]!; else C[cOff + j] = row[j]!; }
}

/** sum over k < K of a[ao + k*sa] * b[bo + k], from zero in order (its own function: called per output, so optimized early). */
function dot(a: NumArray, ao: number, sa: number, b: NumArray, bo: number, K: number): number {
  let s = 0;
  for (let k = 0; k < K; k++) s += a[ao + k * sa]! * b[bo + k]!;
  return s;
}

/** Row-major operand helper: a matrix stored row-major at `off` with `cols` columns, optionally transposed. */
export function rowMajor(data: NumArray, off: number, cols: number, transposed = false): Operand {
  return transposed ? { data, off, rs: 1, cs: cols } : { data, off, rs: cols, cs: 1 };
}

// ---- WebAssembly SIMD path ------------------------------------------------------------------------------

let useSimd = true;
/** Whether kernels should take their WebAssembly SIMD paths. */
export function simdOn(): boolean { return useSimd; }
/** Switch the SIMD path off or on (tests compare both paths). */
export function setSimd(on: boolean): void { useSimd = on; }

const SMC = 128, SNC = 512;
/** Tiles per chunk when threads share a product: small enough that a thread slowed down takes fewer of them. */
const SHARED_CHUNK = 8;
/** Bytes the SIMD path lays out in the kernel memory at once; a product needing more goes in row blocks. */
const SIMD_MAX_BYTES = 1 << 29;
let views: { buffer: ArrayBufferLike; f32: Float32Array; f64: Float64Array } | undefined;

// Which A the kernel memory holds packed at offset 0, so the next product with the same constant operand (a
// weight, for the next probe of a lockstep side) skips packing. Anything else that writes there clears it.
// (A plain reference: a WeakRef's target stays alive until the current job ends, and a whole fold is one job,
// so every weight ever referenced would be kept. This keeps one weight alive at most.)
let packedNow: { data: NumArray; key: string } | undefined;

function viewsOf(simd: SimdKernels, bytes: number): { f32: Float32Array; f64: Float64Array } {
  const mem = simd.memory;
  if (mem.buffer.byteLength < bytes) mem.grow(Math.ceil((bytes - mem.buffer.byteLength) / 65536));
  if (!views || views.buffer !== mem.buffer) {
    views = { buffer: mem.buffer, f32: new Float32Array(mem.buffer), f64: new Float64Array(mem.buffer) };
  }
  return views;
}

/** Forget the packed copy of `data` (its array now holds other values). */
export function forgetPacked(data: NumArray): void {
  if (packedNow?.data === data) packedNow = undefined;
  if (staged === data) staged = undefined;
}

/** Views of the SIMD module's memory with at least `bytes` bytes (each call lays out its data from offset 0). */
export function memoryViews(simd: SimdKernels, bytes: number): { f32: Float32Array; f64: Float64Array } {
  packedNow = undefined; // the caller overwrites the packed operand
  staged = undefined;
  return viewsOf(simd, bytes);
}

// A float32 weight read from disk straight into the kernel memory's float32 staging area (offset 0), where
// gemmWidening would copy it: that product then skips the copy. Only the evaluator stages a weight, for the one
// Conv node about to take it as A (src/eval/run.ts WeightCache); anything else that writes there forgets it.
let staged: NumArray | undefined;

/**
 * The staging area for a float32 A of M rows of K, as bytes to read the weight into, or undefined when a float64
 * product with it might not take the widening path (no SIMD, or too large for the kernel memory at the widest
 * panel). What the area held before is gone: call markStaged with the array read into it.
 */
export function stagingFor(M: number, K: number): Uint8Array | undefined {
  const simd = useSimd ? simdKernels() : undefined;
  if (!simd || M * K < SMALL_WORK || M < 2) return undefined;
  const rows = Math.ceil(M / 4) * 4;
  const widest = rows * K * 4 + rows * K * 8 + K * SNC * 8 + rows * SNC * 8; // gemmWidening's layout at N >= SNC
  if (widest > SIMD_MAX_BYTES) return undefined;
  packedNow = undefined;
  staged = undefined;
  const { f32 } = viewsOf(simd, rows * K * 4);
  return new Uint8Array(f32.buffer, 0, M * K * 4);
}

let stagedUsed = 0;
/** Products that found their weight staged so far (tests check staging really happened). */
export function stagedProducts(): number { return stagedUsed; }

/** `a` (M x K, row-major) now fills the staging area stagingFor gave. */
export function markStaged(a: Float32Array): void { staged = a; }

/**
 * Copy columns [j0, j0 + nc) of B into tiles of nr columns (32 bytes), each tile k-major: element (k, c) goes to
 * tile floor(c / nr), row k, lane c % nr. Lanes past nc are 0.
 */
function packBTiles(mem: Float32Array | Float64Array, at: number, B: Operand, j0: number, nc: number, nr: number, K: number): void {
  const bd = B.data, brs = B.rs, bcs = B.cs;
  const tiles = Math.ceil(nc / nr), full = Math.floor(nc / nr), step = K * nr;
  if (nc % nr) mem.fill(0, at + (tiles - 1) * step, at + tiles * step);
  if (bcs === 1) {
    // rows of B in order (each read once, front to back), spread over the tiles
    for (let k = 0; k < K; k++) {
      const o = B.off + k * brs + j0;
      let d = at + k * nr;
      if (nr === 4) {
        for (let t = 0, c = o; t < full; t++, c += 4, d += step) {
          mem[d] = bd[c]!; mem[d + 1] = bd[c + 1]!; mem[d + 2] = bd[c + 2]!; mem[d + 3] = bd[c + 3]!;
        }
      } else {
        for (let t = 0, c = o; t < full; t++, c += nr, d += step) for (let l = 0; l < nr; l++) mem[d + l] = bd[c + l]!;
      }
      for (let c = full * nr; c < nc; c++) mem[at + full * step + k * nr + (c - full * nr)] = bd[o + c]!;
    }
    return;
  }
  for (let t = 0; t < tiles; t++) {
    const cols = Math.min(nr, nc - t * nr), base = at + t * step;
    for (let k = 0; k < K; k++) {
      const o = B.off + k * brs + (j0 + t * nr) * bcs, d = base + k * nr;
      for (let c = 0; c < cols; c++) mem[d + c] = bd[o + c * bcs]!;
    }
  }
}

/**
 * Copy rows [r0, r0 + rows) of A into `mem` from offset 0, row-major (K elements per row; one copy per row, a
 * conversion when the element types differ), and zero the rows up to the next multiple of 4 (the kernel's tile).
 */
function copyARows(mem: Float32Array | Float64Array, A: Operand, r0: number, rows: number, K: number): void {
  const ad = A.data, ars = A.rs, acs = A.cs;
  if (acs === 1 && ars === K) mem.set(ad.subarray(A.off + r0 * K, A.off + (r0 + rows) * K), 0);
  else {
    for (let r = 0; r < rows; r++) {
      const base = A.off + (r0 + r) * ars, o = r * K;
      if (acs === 1) mem.set(ad.subarray(base, base + K), o);
      else for (let k = 0; k < K; k++) mem[o + k] = ad[base + k * acs]!;
    }
  }
  const padded = Math.ceil(rows / 4) * 4;
  if (padded > rows) mem.fill(0, rows * K, padded * K);
}

/**
 * The micro-kernel in WebAssembly: A's rows are copied in (row-major, padded to a multiple of 4), then for each panel of
 * up to 512 columns B is copied row-major and C's rows are computed in the kernel memory with the sum over k
 * kept in registers, in bands of tiles across threads (src/eval/threads.ts) when the product is large, and
 * copied (or added) into C. The kernel's element type follows C: a Float32Array C is computed in float32,
 * anything else in float64. Returns false when even a block of 4 rows does not fit the kernel memory.
 */
function gemmSimd(simd: SimdKernels, M: number, N: number, K: number, A: Operand, B: Operand, C: NumArray, cOff: number, ldc: number, accumulate: boolean): boolean {
  const f64 = !(C instanceof Float32Array);
  const es = f64 ? 8 : 4, nr = 32 / es;
  const ldcMax = Math.ceil(Math.min(N, SNC) / nr) * nr;
  const pbBytes = K * ldcMax * es;
  const rowBytes = (K + ldcMax) * es; // a packed row of A and a row of C
  const room = SIMD_MAX_BYTES - pbBytes;
  if (room < 4 * rowBytes) return false;
  const block = Math.min(Math.ceil(M / 4) * 4, Math.floor(room / rowBytes / 4) * 4);
  const sameType = f64 ? C instanceof Float64Array : true;
  const threads = threadCount();
  if (f64 && A.data instanceof Float32Array && gemmWidening(simd, M, N, K, A, B, C, cOff, ldc, accumulate, threads)) return true;
  for (let r0 = 0; r0 < M; r0 += block) {
    const rows = Math.min(block, M - r0), tiles = Math.ceil(rows / 4);
    const pb = tiles * 4 * K * es, pc = pb + pbBytes;
    const { f32, f64: d64 } = viewsOf(simd, pc + tiles * 4 * ldcMax * es);
    const mem = f64 ? d64 : f32;
    const pbE = pb / es, pcE = pc / es;
    // the whole of a constant A packed by the last product is still there
    const key = rows === M && isConstant(A.data) ? `${A.off},${A.rs},${A.cs},${M},${K},${es}` : undefined;
    if (key === undefined || packedNow?.key !== key || packedNow.data !== A.data) {
      staged = undefined;
      copyARows(mem, A, r0, rows, K);
      packedNow = key === undefined ? undefined : { data: A.data, key };
    }
    for (let j0 = 0; j0 < N; j0 += SNC) {
      const nc = Math.min(SNC, N - j0), nTiles = Math.ceil(nc / nr), ldcE = nTiles * nr;
      if (B.tiles) B.tiles(mem, pbE, j0, nc, nr); else packBTiles(mem, pbE, B, j0, nc, nr, K);
      const span = (t0: number, t1: number): TileSpan =>
        ({ f64, pa: 0, pb, pc, nTiles, K, ldcBytes: ldcE * es, ldbBytes: K * 32, t0, t1, chunk: SMC / 4, a32: -1 });
      if (threads > 1 && rows >= 8 && rows * nc * K >= PARALLEL_MIN_WORK) inBands({ ...span(0, tiles), chunk: SHARED_CHUNK }, threads, (sp, counter) => runChunks(simd, sp, counter));
      else runTiles(simd, span(0, tiles));
      for (let r = 0; r < rows; r++) {
        const dst = cOff + (r0 + r) * ldc + j0, src = pcE + r * ldcE;
        if (accumulate) for (let c = 0; c < nc; c++) C[dst + c] += mem[src + c]!;
        else if (sameType) C.set(mem.subarray(src, src + nc), dst);
        else for (let c = 0; c < nc; c++) C[dst + c] = mem[src + c]!;
      }
    }
  }
  return true;
}

/**
 * gemmSimd in float64 for a float32 A (a weight as stored), all of A at once: A's rows are copied in as they are
 * (float32, no conversion), and the first product widens them to float64 tile by tile, each on the thread that
 * computes that tile, into the float64 A the kernel reads (kept for the next product with this A). The kernel sees
 * the values widening up front gives (float32 to float64 is exact), so C is the same bit for bit; the widening is
 * shared among the threads instead of done on this one before they start. False when it does not fit.
 */
function gemmWidening(simd: SimdKernels, M: number, N: number, K: number, A: Operand, B: Operand, C: NumArray, cOff: number, ldc: number, accumulate: boolean, threads: number): boolean {
  const nr = 4, tiles = Math.ceil(M / 4);
  const ldcMax = Math.ceil(Math.min(N, SNC) / nr) * nr;
  const pa = tiles * 4 * K * 4, pb = pa + tiles * 4 * K * 8, pc = pb + K * ldcMax * 8;
  const need = pc + tiles * 4 * ldcMax * 8;
  if (need > SIMD_MAX_BYTES) return false;
  const { f32, f64: mem } = viewsOf(simd, need);
  // a constant A copied in, and widened, by the last product is still there
  const key = isConstant(A.data) ? `${A.off},${A.rs},${A.cs},${M},${K},widen` : undefined;
  let a32 = -1;
  if (key === undefined || packedNow?.key !== key || packedNow.data !== A.data) {
    packedNow = undefined;
    // a weight read straight into the staging area is there already (only the rows' padding is left to zero)
    if (staged === A.data && A.off === 0 && A.rs === K && A.cs === 1 && A.data.length === M * K) { f32.fill(0, M * K, tiles * 4 * K); stagedUsed++; }
    else { staged = undefined; copyARows(f32, A, 0, M, K); }
    a32 = 0;
  }
  const sameType = C instanceof Float64Array;
  const pbE = pb / 8, pcE = pc / 8;
  for (let j0 = 0; j0 < N; j0 += SNC) {
    const nc = Math.min(SNC, N - j0), nTiles = Math.ceil(nc / nr), ldcE = nTiles * nr;
    if (B.tiles) B.tiles(mem, pbE, j0, nc, nr); else packBTiles(mem, pbE, B, j0, nc, nr, K);
    const span: TileSpan = { f64: true, pa, pb, pc, nTiles, K, ldcBytes: ldcE * 8, ldbBytes: K * 32, t0: 0, t1: tiles, chunk: SMC / 4, a32 };
    if (threads > 1 && M >= 8 && M * nc * K >= PARALLEL_MIN_WORK) inBands({ ...span, chunk: SHARED_CHUNK }, threads, (sp, counter) => runChunks(simd, sp, counter));
    else runTiles(simd, span);
    a32 = -1; // every tile is widened now (the next panel, and the next product with this A, find it done)
    if (key !== undefined) packedNow = { data: A.data, key };
    for (let r = 0; r < M; r++) {
      const dst = cOff + r * ldc + j0, src = pcE + r * ldcE;
      if (accumulate) for (let c = 0; c < nc; c++) C[dst + c] += mem[src + c]!;
      else if (sameType) C.set(mem.subarray(src, src + nc), dst);
      else for (let c = 0; c < nc; c++) C[dst + c] = mem[src + c]!;
    }
  }
  return true;
}
