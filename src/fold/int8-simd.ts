// Quantization-readiness figures of a layer's float32 weights in WebAssembly SIMD, four weights at a time: each
// output channel's smallest and largest weight, then the SQNR sums of symmetric 8-bit rounding under the
// per-tensor and the per-channel scale (src/fold/int8.ts has the definitions and the scalar reference). The
// rounding is the same arithmetic element for element: f32x4.div is the float32 quotient x / scale,
// f32x4.nearest rounds half to even as QuantizeLinear does, min/max saturate to [-128, 127], f32x4.mul is the
// float32 dequantized value; each difference and square is taken in float64. Only the order of the float64 sums
// differs (two lanes, then the lanes in a fixed order), so the figures are deterministic and agree with the
// scalar ones to rounding. A folded layer of millions of weights is read twice per model, so this runs over
// every weight of a large model four times per fold.
import {
  END, F32, F32X4_DIV, F32X4_MAX, F32X4_MIN, F32X4_MUL, F32X4_NEAREST, F32X4_SPLAT, F64X2_ADD, F64X2_MUL,
  F64X2_PROMOTE_LOW_F32X4, F64X2_SUB, I32, I8X16_SHUFFLE, LOCAL_GET, LOCAL_SET, section, simd, uleb, V128,
  V128_CONST, V128_LOAD, V128_STORE, vec, WASM_HEADER, wasmName, lazyInstance, vectorLoop,
} from '../wasm.js';

const F32X4_PMIN = 0xea, F32X4_PMAX = 0xeb;

const f32x4 = (v: number): number[] => [...new Uint8Array(new Float32Array([v, v, v, v]).buffer)];
const HIGH_TO_LOW = [8, 9, 10, 11, 12, 13, 14, 15, 0, 1, 2, 3, 4, 5, 6, 7];

// minmax(p, groups, out): lo/hi over `groups` vectors of 4 float32 from byte p, NaN skipped as the scalar
// comparisons skip it (pmin/pmax keep the accumulator when the comparison is false)
function minmaxBody(): number[] {
  const [P, G, OUT, LO, HI, X] = [0, 1, 2, 3, 4, 5];
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i];
  const code = [
    ...simd(V128_CONST), ...f32x4(Infinity), ...set(LO), ...simd(V128_CONST), ...f32x4(-Infinity), ...set(HI),
    ...vectorLoop(P, G, [
      ...get(P), ...simd(V128_LOAD), 0, 0, ...set(X),
      ...get(LO), ...get(X), ...simd(F32X4_PMIN), ...set(LO),
      ...get(HI), ...get(X), ...simd(F32X4_PMAX), ...set(HI),
    ]),
    ...get(OUT), ...get(LO), ...simd(V128_STORE), 4, 0,
    ...get(OUT), ...get(HI), ...simd(V128_STORE), 4, 16,
    END,
  ];
  const locals = vec([[...uleb(3), V128]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

// noise(p, groups, scaleT, scaleC, out): six float64x2 sums over the vectors from byte p, stored at out:
// x^2 (low lanes, high lanes), (x - q_tensor)^2 (low, high), (x - q_channel)^2 (low, high)
function noiseBody(): number[] {
  const [P, G, ST, SC, OUT] = [0, 1, 2, 3, 4];
  const [VT, VC, X, XL, XH, Q, D, LO, HI] = [5, 6, 7, 8, 9, 10, 11, 12, 13];
  const ACC = 14; // 14..19
  const get = (i: number) => [LOCAL_GET, i], set = (i: number) => [LOCAL_SET, i];
  const promoteHigh = (i: number) => [...get(i), ...get(i), ...simd(I8X16_SHUFFLE), ...HIGH_TO_LOW, ...simd(F64X2_PROMOTE_LOW_F32X4)];
  const addSquare = (acc: number, d: number[]) => [...get(acc), ...d, ...set(D), ...get(D), ...get(D), ...simd(F64X2_MUL), ...simd(F64X2_ADD), ...set(acc)];
  const rounded = (scale: number) => [
    ...get(X), ...get(scale), ...simd(F32X4_DIV), ...simd(F32X4_NEAREST), ...get(LO), ...simd(F32X4_MAX), ...get(HI), ...simd(F32X4_MIN),
    ...get(scale), ...simd(F32X4_MUL), ...set(Q),
  ];
  const noise = (acc: number) => [
    ...addSquare(acc, [...get(XL), ...get(Q), ...simd(F64X2_PROMOTE_LOW_F32X4), ...simd(F64X2_SUB)]),
    ...addSquare(acc + 1, [...get(XH), ...promoteHigh(Q), ...simd(F64X2_SUB)]),
  ];
  const code = [
    ...get(ST), ...simd(F32X4_SPLAT), ...set(VT), ...get(SC), ...simd(F32X4_SPLAT), ...set(VC),
    ...simd(V128_CONST), ...f32x4(-128), ...set(LO), ...simd(V128_CONST), ...f32x4(127), ...set(HI),
    ...vectorLoop(P, G, [
      ...get(P), ...simd(V128_LOAD), 0, 0, ...set(X),
      ...get(X), ...simd(F64X2_PROMOTE_LOW_F32X4), ...set(XL),
      ...promoteHigh(X), ...set(XH),
      ...get(ACC), ...get(XL), ...get(XL), ...simd(F64X2_MUL), ...simd(F64X2_ADD), ...set(ACC),
      ...get(ACC + 1), ...get(XH), ...get(XH), ...simd(F64X2_MUL), ...simd(F64X2_ADD), ...set(ACC + 1),
      ...rounded(VT), ...noise(ACC + 2),
      ...rounded(VC), ...noise(ACC + 4),
    ]),
    ...[0, 1, 2, 3, 4, 5].flatMap((k) => [...get(OUT), ...get(ACC + k), ...simd(V128_STORE), 4, ...uleb(16 * k)]),
    END,
  ];
  const locals = vec([[...uleb(15), V128]]);
  const body = [...locals, ...code];
  return [...uleb(body.length), ...body];
}

function moduleBytes(): Uint8Array<ArrayBuffer> {
  const types = section(1, vec([
    [0x60, ...vec([[I32], [I32], [I32]]), ...vec([])],
    [0x60, ...vec([[I32], [I32], [F32], [F32], [I32]]), ...vec([])],
  ]));
  const funcs = section(3, vec([[0], [1]]));
  const memory = section(5, vec([[0x00, ...uleb(1)]]));
  const exports = section(7, vec([[...wasmName('mem'), 0x02, 0], [...wasmName('minmax'), 0x00, 0], [...wasmName('noise'), 0x00, 1]]));
  const code = section(10, vec([minmaxBody(), noiseBody()]));
  return new Uint8Array([...WASM_HEADER, ...types, ...funcs, ...memory, ...exports, ...code]);
}

interface Kernels {
  memory: WebAssembly.Memory;
  minmax: (p: number, groups: number, out: number) => void;
  noise: (p: number, groups: number, scaleT: number, scaleC: number, out: number) => void;
}

const kernels = lazyInstance<Kernels>(moduleBytes);

/** Whether the SIMD figures are available here (tests compare them with the scalar ones). */
export function int8SimdAvailable(): boolean { return kernels() !== undefined; }

const OUT = 0, DATA = 256; // the sums and min/max go to bytes [0, 96); the weights start at byte 256

/** The weights laid out in the kernels' memory as float32; returns the float32 view of them. */
export function stageFloat32(n: number, fill: (view: Float32Array) => void): Float32Array | undefined {
  const k = kernels();
  if (!k) return undefined;
  const need = DATA + n * 4;
  if (k.memory.buffer.byteLength < need) k.memory.grow(Math.ceil((need - k.memory.buffer.byteLength) / 65536));
  const view = new Float32Array(k.memory.buffer, DATA, n);
  fill(view);
  return view;
}

/** Smallest and largest weight of [i, i + count) of the staged weights (NaN skipped; lo > hi when none). */
export function minmaxRun(staged: Float32Array, i: number, count: number, into: Float64Array): void {
  const k = kernels()!;
  const groups = count >> 2;
  k.minmax(DATA + i * 4, groups, OUT);
  const v = new Float32Array(k.memory.buffer, OUT, 8);
  let lo = Infinity, hi = -Infinity;
  for (let l = 0; l < 4; l++) { if (v[l]! < lo) lo = v[l]!; if (v[4 + l]! > hi) hi = v[4 + l]!; }
  for (let j = i + groups * 4; j < i + count; j++) { const x = staged[j]!; if (x < lo) lo = x; if (x > hi) hi = x; }
  into[0] = lo; into[1] = hi;
}

/**
 * Add the signal and rounding-noise sums of [i, i + count) of the staged weights to acc ([0] signal, [1] noise
 * under scaleT, [2] noise under scaleC), via `tail` for the last count % 4 weights. Both scales above 0.
 */
export function noiseRun(staged: Float32Array, i: number, count: number, scaleT: number, scaleC: number, acc: Float64Array, tail: (x: number) => [number, number]): void {
  const k = kernels()!;
  const groups = count >> 2;
  k.noise(DATA + i * 4, groups, scaleT, scaleC, OUT);
  const s = new Float64Array(k.memory.buffer, OUT, 12);
  acc[0] += ((s[0]! + s[1]!) + s[2]!) + s[3]!;
  acc[1] += ((s[4]! + s[5]!) + s[6]!) + s[7]!;
  acc[2] += ((s[8]! + s[9]!) + s[10]!) + s[11]!;
  for (let j = i + groups * 4; j < i + count; j++) {
    const x = staged[j]!;
    const [qt, qc] = tail(x);
    acc[0] += x * x; acc[1] += (x - qt) ** 2; acc[2] += (x - qc) ** 2;
  }
}
