// SIMD micro-kernels for the blocked GEMM, as a tiny WebAssembly module assembled here byte by byte (no
// toolchain, no binary blob: the instruction list below is the source). Packed panels live in the module's
// memory; each kernel multiplies an A block (tiles of 4 rows, k-major) by a B panel (tiles of 32 bytes of
// columns, k-major) into a row-major C block, accumulating in registers over the whole k range:
//   f32: 4 x 8 tile, f32x4 lanes (float32 arithmetic, the deployment mode)
//   f64: 4 x 4 tile, f64x2 lanes (float64 arithmetic, the ground-truth mode)
// Returns undefined when the runtime has no WebAssembly SIMD; gemm.ts then uses its scalar path.

export interface SimdKernels {
  memory: WebAssembly.Memory;
  /**
   * Depthwise (single-channel) stride-1 convolution over a zero-padded plane, one vector of outputs at a time:
   * (inP, outP, wP, outH, outVecs, inRowBytes, outRowBytes, kH, kW, dHBytes, dWBytes), byte offsets and steps.
   */
  d32: (inP: number, outP: number, wP: number, outH: number, outVecs: number, inRow: number, outRow: number, kH: number, kW: number, dH: number, dW: number) => void;
  d64: (inP: number, outP: number, wP: number, outH: number, outVecs: number, inRow: number, outRow: number, kH: number, kW: number, dH: number, dW: number) => void;
  /** (pa, pb, pc, mTiles, nTiles, kc, ldcBytes): byte offsets into memory. */
  k32: (pa: number, pb: number, pc: number, mTiles: number, nTiles: number, kc: number, ldcBytes: number) => void;
  k64: (pa: number, pb: number, pc: number, mTiles: number, nTiles: number, kc: number, ldcBytes: number) => void;
}

function uleb(n: number): number[] {
  const out: number[] = [];
  do {
    let b = n & 0x7f;
    n >>>= 7;
    if (n !== 0) b |= 0x80;
    out.push(b);
  } while (n !== 0);
  return out;
}

function sleb(n: number): number[] {
  const out: number[] = [];
  for (;;) {
    const b = n & 0x7f;
    n >>= 7;
    if ((n === 0 && (b & 0x40) === 0) || (n === -1 && (b & 0x40) !== 0)) { out.push(b); return out; }
    out.push(b | 0x80);
  }
}

const vec = (items: number[][]): number[] => [...uleb(items.length), ...items.flat()];
const section = (id: number, body: number[]): number[] => [id, ...uleb(body.length), ...body];

// opcodes
const LOCAL_GET = 0x20, LOCAL_SET = 0x21, I32_CONST = 0x41, I32_ADD = 0x6a, I32_SUB = 0x6b, I32_MUL = 0x6c;
const I32_LT_U = 0x49, LOOP = 0x03, END = 0x0b, BR_IF = 0x0d, VOID = 0x40;
const simd = (op: number): number[] => [0xfd, ...uleb(op)];
const V128_LOAD = 0x00, V128_STORE = 0x0b, V128_CONST = 0x0c, LOAD32_SPLAT = 0x09, LOAD64_SPLAT = 0x0a;
const F32X4_ADD = 0xe4, F32X4_MUL = 0xe6, F64X2_ADD = 0xf0, F64X2_MUL = 0xf2;

// params: pa 0, pb 1, pc 2, mTiles 3, nTiles 4, kc 5, ldc 6; locals: jt 7, it 8, k 9, ap 10, bp 11, cp 12,
// acc0..acc7 13..20, b0 21, b1 22, a 23
const PA = 0, PB = 1, PC = 2, MT = 3, NT = 4, KC = 5, LDC = 6, JT = 7, IT = 8, K = 9, AP = 10, BP = 11, CP = 12;
const ACC = 13, B0 = 21, B1 = 22, A = 23;

function kernelBody(f64: boolean): number[] {
  const es = f64 ? 8 : 4; // element size
  const aTileBytes = 4 * es; // one k step of an A tile (4 rows)
  const add = simd(f64 ? F64X2_ADD : F32X4_ADD), mul = simd(f64 ? F64X2_MUL : F32X4_MUL);
  const splat = f64 ? [...simd(LOAD64_SPLAT), 3] : [...simd(LOAD32_SPLAT), 2];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i];
  const c = (v: number) => [I32_CONST, ...sleb(v)];
  const code: number[] = [];
  const emit = (...xs: number[][]) => { for (const x of xs) code.push(...x); };
  emit(c(0), set(JT));
  emit([LOOP, VOID]); // j tiles
  emit(c(0), set(IT));
  emit([LOOP, VOID]); // i tiles
  // ap = pa + it * kc * aTileBytes ; bp = pb + jt * kc * 32
  emit(get(PA), get(IT), get(KC), [I32_MUL], c(aTileBytes), [I32_MUL], [I32_ADD], set(AP));
  emit(get(PB), get(JT), get(KC), [I32_MUL], c(32), [I32_MUL], [I32_ADD], set(BP));
  for (let r = 0; r < 8; r++) emit(simd(V128_CONST), new Array(16).fill(0), set(ACC + r));
  emit(get(KC), set(K));
  emit([LOOP, VOID]); // k
  emit(get(BP), simd(V128_LOAD), [4, ...uleb(0)], set(B0));
  emit(get(BP), simd(V128_LOAD), [4, ...uleb(16)], set(B1));
  for (let r = 0; r < 4; r++) {
    emit(get(AP), splat, uleb(r * es), set(A));
    emit(get(ACC + 2 * r), get(A), get(B0), mul, add, set(ACC + 2 * r));
    emit(get(ACC + 2 * r + 1), get(A), get(B1), mul, add, set(ACC + 2 * r + 1));
  }
  emit(get(AP), c(aTileBytes), [I32_ADD], set(AP));
  emit(get(BP), c(32), [I32_ADD], set(BP));
  emit(get(K), c(1), [I32_SUB], [0x22, K]); // local.tee k
  emit([BR_IF, 0], [END]);
  // cp = pc + it*4*ldc + jt*32
  emit(get(PC), get(IT), c(4), [I32_MUL], get(LDC), [I32_MUL], [I32_ADD], get(JT), c(32), [I32_MUL], [I32_ADD], set(CP));
  for (let r = 0; r < 4; r++) {
    emit(get(CP), get(ACC + 2 * r), simd(V128_STORE), [4, ...uleb(0)]);
    emit(get(CP), get(ACC + 2 * r + 1), simd(V128_STORE), [4, ...uleb(16)]);
    if (r < 3) emit(get(CP), get(LDC), [I32_ADD], set(CP));
  }
  emit(get(IT), c(1), [I32_ADD], [0x22, IT], get(MT), [I32_LT_U], [BR_IF, 0], [END]);
  emit(get(JT), c(1), [I32_ADD], [0x22, JT], get(NT), [I32_LT_U], [BR_IF, 0], [END]);
  emit([END]);
  const locals = vec([[...uleb(6), 0x7f], [...uleb(11), 0x7b]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

// depthwise params: inP 0, outP 1, wP 2, outH 3, outVecs 4, inRow 5, outRow 6, kH 7, kW 8, dH 9, dW 10;
// locals: oh 11, v 12, kh 13, kw 14, p 15, pw 16, row 17, acc 18 (v128)
function depthwiseBody(f64: boolean): number[] {
  const es = f64 ? 8 : 4;
  const add = simd(f64 ? F64X2_ADD : F32X4_ADD), mul = simd(f64 ? F64X2_MUL : F32X4_MUL);
  const splat = f64 ? [...simd(LOAD64_SPLAT), 3, 0] : [...simd(LOAD32_SPLAT), 2, 0];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i], tee = (i: number) => [0x22, i];
  const c = (v: number) => [I32_CONST, ...sleb(v)];
  const [IN, OUT, W, OH_N, VN, INROW, OUTROW, KH, KW, DH, DW] = [0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10];
  const [OH, V, KHI, KWI, P, PW, ROW, ACC1] = [11, 12, 13, 14, 15, 16, 17, 18];
  const code: number[] = [];
  const emit = (...xs: number[][]) => { for (const x of xs) code.push(...x); };
  emit(c(0), set(OH), [LOOP, VOID]);
  emit(c(0), set(V), [LOOP, VOID]);
  emit(simd(V128_CONST), new Array(16).fill(0), set(ACC1));
  emit(get(W), set(PW));
  // row = in + oh*inRow + v*16
  emit(get(IN), get(OH), get(INROW), [I32_MUL], [I32_ADD], get(V), c(16), [I32_MUL], [I32_ADD], set(ROW));
  emit(c(0), set(KHI), [LOOP, VOID]);
  emit(get(ROW), set(P), c(0), set(KWI), [LOOP, VOID]);
  emit(get(ACC1), get(PW), splat, get(P), simd(V128_LOAD), [4, 0], mul, add, set(ACC1));
  emit(get(PW), c(es), [I32_ADD], set(PW));
  emit(get(P), get(DW), [I32_ADD], set(P));
  emit(get(KWI), c(1), [I32_ADD], tee(KWI), get(KW), [I32_LT_U], [BR_IF, 0], [END]);
  emit(get(ROW), get(DH), [I32_ADD], set(ROW));
  emit(get(KHI), c(1), [I32_ADD], tee(KHI), get(KH), [I32_LT_U], [BR_IF, 0], [END]);
  // out + oh*outRow + v*16
  emit(get(OUT), get(OH), get(OUTROW), [I32_MUL], [I32_ADD], get(V), c(16), [I32_MUL], [I32_ADD], get(ACC1), simd(V128_STORE), [4, 0]);
  emit(get(V), c(1), [I32_ADD], tee(V), get(VN), [I32_LT_U], [BR_IF, 0], [END]);
  emit(get(OH), c(1), [I32_ADD], tee(OH), get(OH_N), [I32_LT_U], [BR_IF, 0], [END]);
  emit([END]);
  const locals = vec([[...uleb(7), 0x7f], [...uleb(1), 0x7b]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

export function moduleBytes(): Uint8Array<ArrayBuffer> {
  const i32 = 0x7f;
  const types = section(1, vec([
    [0x60, ...vec(new Array(7).fill([i32])), ...vec([])],
    [0x60, ...vec(new Array(11).fill([i32])), ...vec([])],
  ]));
  const funcs = section(3, vec([[0], [0], [1], [1]]));
  const memory = section(5, vec([[0x00, ...uleb(1)]]));
  const name = (s: string) => vec([...s].map((ch) => [ch.charCodeAt(0)]));
  const exports = section(7, vec([
    [...name('mem'), 0x02, 0], [...name('k32'), 0x00, 0], [...name('k64'), 0x00, 1], [...name('d32'), 0x00, 2], [...name('d64'), 0x00, 3],
  ]));
  const code = section(10, vec([kernelBody(false), kernelBody(true), depthwiseBody(false), depthwiseBody(true)]));
  return new Uint8Array([0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00, ...types, ...funcs, ...memory, ...exports, ...code]);
}

let cached: SimdKernels | null | undefined;

export function simdKernels(): SimdKernels | undefined {
  if (cached === undefined) {
    try {
      const inst = new WebAssembly.Instance(new WebAssembly.Module(moduleBytes()), {});
      const e = inst.exports as unknown as SimdKernels & { mem: WebAssembly.Memory };
      cached = { memory: e.mem, k32: e.k32, k64: e.k64, d32: e.d32, d64: e.d64 };
    } catch {
      cached = null;
    }
  }
  return cached ?? undefined;
}
