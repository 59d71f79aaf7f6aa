// Scaling float32 weights by a float64 factor in WebAssembly SIMD, four at a time: each weight is widened to
// float64, multiplied, and rounded once to float32 (f32x4.demote_f64x2_zero), exactly the arithmetic of the
// scalar `f[j] = f[j] * s` on a Float32Array. Beside the scaled values it returns what the range check needs: the
// largest |product| before rounding (NaN products skipped, as the scalar comparison skips them) and whether any
// product was NaN. A fold rewrites every weight of a large model on its way to the output, and the quantization
// figures and the check read the scaled weights again, so this runs over each weight several times.
import {
  BLOCK, BR_IF, END, F64X2_MUL, F64X2_PROMOTE_LOW_F32X4, I32, I32_EQZ, I8X16_SHUFFLE, LOCAL_GET, LOCAL_SET,
  section, simd, uleb, V128, V128_LOAD, V128_STORE, vec, VOID, WASM_HEADER, wasmName, lazyInstance, vectorLoop,
} from '../wasm.js';

const F64 = 0x7c;
const F64X2_SPLAT = 0x14, F64X2_ABS = 0xec, F64X2_PMAX = 0xf7, F64X2_NE = 0x48, V128_OR = 0x50, F32X4_DEMOTE_F64X2_ZERO = 0x5e;
const HIGH_TO_LOW = [8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];
const JOIN_LOW_HALVES = [0, 1, 2, 3, 4, 5, 6, 7, 16, 17, 18, 19, 20, 21, 22, 23];

// scale(p, groups, s, write, out): groups of 4 float32 from byte p times s; written back when write != 0;
// out receives the f64x2 max |product| and the f64x2 NaN mask
function scaleBody(): number[] {
  const [P, G, S, W, OUT] = [0, 1, 2, 3, 4];
  const [VS, X, RL, RH, MAX, NAN] = [5, 6, 7, 8, 9, 10];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i];
  const track = (r: number) => [
    ...get(MAX), ...get(r), ...simd(F64X2_ABS), ...simd(F64X2_PMAX), ...set(MAX),
    ...get(NAN), ...get(r), ...get(r), ...simd(F64X2_NE), ...simd(V128_OR), ...set(NAN),
  ];
  const code = [
    ...get(S), ...simd(F64X2_SPLAT), ...set(VS),
    ...vectorLoop(P, G, [
      ...get(P), ...simd(V128_LOAD), 0, 0, ...set(X),
      ...get(X), ...simd(F64X2_PROMOTE_LOW_F32X4), ...get(VS), ...simd(F64X2_MUL), ...set(RL),
      ...get(X), ...get(X), ...simd(I8X16_SHUFFLE), ...HIGH_TO_LOW, ...simd(F64X2_PROMOTE_LOW_F32X4), ...get(VS), ...simd(F64X2_MUL), ...set(RH),
      ...track(RL), ...track(RH),
      BLOCK, VOID, ...get(W), I32_EQZ, BR_IF, 0,
      ...get(P), ...get(RL), ...simd(F32X4_DEMOTE_F64X2_ZERO), ...get(RH), ...simd(F32X4_DEMOTE_F64X2_ZERO),
      ...simd(I8X16_SHUFFLE), ...JOIN_LOW_HALVES, ...simd(V128_STORE), 2, 0,
      END,
    ]),
    ...get(OUT), ...get(MAX), ...simd(V128_STORE), 4, 0,
    ...get(OUT), ...get(NAN), ...simd(V128_STORE), 4, 16,
    END,
  ];
  const locals = vec([[...uleb(6), V128]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

function moduleBytes(): Uint8Array<ArrayBuffer> {
  const types = section(1, vec([[0x60, ...vec([[I32], [I32], [F64], [I32], [I32]]), ...vec([])]]));
  const funcs = section(3, vec([[0]]));
  const memory = section(5, vec([[0x00, ...uleb(1)]]));
  const exports = section(7, vec([[...wasmName('mem'), 0x02, 0], [...wasmName('scale'), 0x00, 0]]));
  const code = section(10, vec([scaleBody()]));
  return new Uint8Array([...WASM_HEADER, ...types, ...funcs, ...memory, ...exports, ...code]);
}

interface Kernel { memory: WebAssembly.Memory; scale: (p: number, groups: number, s: number, write: number, out: number) => void }
const kernel = lazyInstance<Kernel>(moduleBytes);

const OUT = 0, DATA = 64;

/** Elements staged in the kernel's memory at a time: a window that stays in cache between copy-in, scaling and copy-out. */
const WINDOW = 1 << 15;

/** Where simdScratch's buffer starts: past the staging window. */
const SCRATCH = DATA + WINDOW * 4;

/**
 * A buffer of `bytes` bytes inside the kernel's memory (undefined without SIMD): a float32 block streamed through
 * it is scaled where it lies, with no copy into the kernel's memory and back. Valid until the next call (growing
 * the memory detaches views of the old one), so it suits one reused buffer, such as the writer's stream buffer.
 */
export function simdScratch(bytes: number): Uint8Array | undefined {
  const k = kernel();
  if (!k) return undefined;
  const need = SCRATCH + bytes;
  if (k.memory.buffer.byteLength < need) k.memory.grow(Math.ceil((need - k.memory.buffer.byteLength) / 65536));
  return new Uint8Array(k.memory.buffer, SCRATCH, bytes);
}

/**
 * Scale (or only measure) runs of a float32 block in SIMD: `runs` gives each run's first element and length
 * within the block and its factor. Returns the largest |product| (NaN when some product is NaN), or undefined when
 * SIMD is not available (the caller then takes its scalar loop). The block goes through the kernel's memory a
 * window at a time (each product stands alone, so where a run is cut does not change any result).
 */
export function scaleRunsSimd(block: Float32Array, runs: (visit: (start: number, length: number, s: number) => void) => void, write: boolean): number | undefined {
  const k = kernel();
  if (!k) return undefined;
  if (block.buffer === k.memory.buffer && block.byteOffset >= SCRATCH) return scaleInPlace(k, block, runs, write);
  const window = Math.min(WINDOW, block.length);
  const need = DATA + window * 4;
  if (k.memory.buffer.byteLength < need) k.memory.grow(Math.ceil((need - k.memory.buffer.byteLength) / 65536));
  const mem = new Float32Array(k.memory.buffer, DATA, window);
  const acc = { max: 0, nan: false };
  const res = new Float64Array(k.memory.buffer, OUT, 4);
  // the window now staged: block elements [w0, w0 + window)
  let w0 = -1, w1 = -1;
  const flush = () => { if (write && w1 > w0) block.set(mem.subarray(0, w1 - w0), w0); };
  const part = (start: number, length: number, s: number) => {
    if (start < w0 || start + length > w1) {
      flush();
      w0 = start; w1 = Math.min(block.length, start + window);
      mem.set(block.subarray(w0, w1));
    }
    scaleRun(k, res, mem, start - w0, length, s, write, acc);
  };
  runs((start, length, s) => {
    for (let p = start; p < start + length; p += window) part(p, Math.min(window, start + length - p), s);
  });
  flush();
  return acc.nan ? NaN : acc.max;
}

/**
 * One run of `length` elements of `arr` (a view of the kernel's memory) from element `at`, times s: groups of four
 * in SIMD, the rest here. The largest |product| and whether one was NaN go into `acc`.
 */
function scaleRun(k: Kernel, res: Float64Array, arr: Float32Array, at: number, length: number, s: number, write: boolean, acc: { max: number; nan: boolean }): void {
  const groups = length >> 2;
  if (groups > 0) {
    k.scale(arr.byteOffset + at * 4, groups, s, write ? 1 : 0, OUT);
    if (res[0]! > acc.max) acc.max = res[0]!;
    if (res[1]! > acc.max) acc.max = res[1]!;
    if (res[2] !== 0 || res[3] !== 0) acc.nan = true; // (the mask lanes are all-ones bit patterns: a NaN double)
  }
  for (let j = at + groups * 4; j < at + length; j++) {
    const r = arr[j]! * s;
    if (write) arr[j] = r;
    const m = Math.abs(r);
    if (m > acc.max) acc.max = m;
    else if (m !== m) acc.nan = true;
  }
}

/** scaleRunsSimd for a block in simdScratch's buffer: the kernel works on it where it lies. */
function scaleInPlace(k: Kernel, block: Float32Array, runs: (visit: (start: number, length: number, s: number) => void) => void, write: boolean): number {
  const acc = { max: 0, nan: false };
  const res = new Float64Array(k.memory.buffer, OUT, 4);
  runs((start, length, s) => scaleRun(k, res, block, start, length, s, write, acc));
  return acc.nan ? NaN : acc.max;
}
