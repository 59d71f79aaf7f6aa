// Weight and bias updates for folding a per-channel affine map into a linear layer. Pure functions on
// float64 arrays and dims; every layout reduces to "which channel does element (a, b, ...) of the first two
// weight axes belong to", so one scaling loop serves Conv, ConvTranspose, Gemm and MatMul.
//
// Into the producer (norm after the layer): W' = s ⊙ W along output channels, b' = s*b + t.
// Into the consumer (norm before the layer): W' = W ⊙ s along input channels, b' = b + Σ W·t.
import { PleatError } from '../errors.js';
import type { Affine } from './affine.js';

/** A weight viewed as [d0, d1, inner]: the first two axes and the product of the rest. */
export interface WeightView {
  d0: number;
  d1: number;
  inner: number;
}

export function weightView(dims: readonly number[]): WeightView {
  let inner = 1;
  for (let i = 2; i < dims.length; i++) inner *= dims[i]!;
  return { d0: dims[0] ?? 1, d1: dims[1] ?? 1, inner };
}

/**
 * Which channel each weight element belongs to: element i (row-major) belongs to channel of[floor(i / unit)].
 * A layout whose whole first-axis row is one channel needs one entry per row (unit = d1 * inner), so a big
 * convolution's map is a few hundred entries and the scaling loops run long stretches with one scale.
 */
export interface ChannelMap {
  of: Int32Array;
  unit: number;
}

/** Channel of each (a, b) pair of the first two axes, row-major. */
export function channelMap(v: WeightView, channelOf: (a: number, b: number) => number): ChannelMap {
  const out = new Int32Array(v.d0 * v.d1);
  for (let a = 0; a < v.d0; a++) for (let b = 0; b < v.d1; b++) out[a * v.d1 + b] = channelOf(a, b);
  return { of: out, unit: v.inner };
}

/** The channel of pair p = a * d1 + b. */
export function pairChannel(map: ChannelMap, v: WeightView, p: number): number {
  return map.of[Math.floor((p * v.inner) / map.unit)]!;
}

/** channel = a (rows of the first axis). */
function byFirstAxis(v: WeightView): ChannelMap {
  const of = new Int32Array(v.d0);
  for (let a = 0; a < v.d0; a++) of[a] = a;
  return { of, unit: v.d1 * v.inner };
}

/** channel = group offset + b, where the group of a is floor(a / perGroup). */
function grouped(v: WeightView, perGroup: number, width: number): ChannelMap {
  const out = new Int32Array(v.d0 * v.d1);
  for (let a = 0; a < v.d0; a++) {
    const base = Math.floor(a / perGroup) * width;
    for (let b = 0, o = a * v.d1; b < v.d1; b++) out[o + b] = base + b;
  }
  return { of: out, unit: v.inner };
}

// The layouts, by layer and side. Conv W is [Cout, Cin/group, k...]; ConvTranspose W is [Cin, Cout/group, k...]
// with output channel g*(Cout/group) + j for input channel i in group g = floor(i / (Cin/group)).
export const layouts = {
  convOutput: (v: WeightView) => byFirstAxis(v),
  convInput: (v: WeightView, group: number) => grouped(v, v.d0 / group, v.d1),
  convTransposeOutput: (v: WeightView, group: number) => grouped(v, v.d0 / group, v.d1),
  rows: (v: WeightView) => byFirstAxis(v),
  columns: (v: WeightView) => grouped(v, Infinity, 0),
};

/**
 * Multiply every element by the scale of its channel, writing into `out` (may be `w` itself) when given.
 * Returns the largest |result| (NaN if any result is NaN), so a caller can check the storage range first.
 */
export function scaleWeights(w: Float32Array | Float64Array, map: ChannelMap, scale: Float64Array, out?: Float32Array | Float64Array): number {
  let max = 0;
  let nan = false;
  for (let e = 0, i = 0; e < map.of.length; e++) {
    const s = scale[map.of[e]!]!;
    for (const end = i + map.unit; i < end; i++) {
      const r = w[i]! * s; // float64 arithmetic; a Float32Array out rounds once on store
      const m = Math.abs(r);
      if (m > max) max = m;
      else if (m !== m) nan = true;
      if (out) out[i] = r;
    }
  }
  return nan ? NaN : max;
}

/**
 * scaleWeights over float32 little-endian raw bytes in place (or only measuring, with write=false), through a
 * DataView so unaligned data needs no copy. Each product is computed in float64 and rounded once on store.
 */
export function scaleRawFloat32(bytes: Uint8Array, map: ChannelMap, scale: Float64Array, write: boolean): number {
  const dv = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  let max = 0;
  let nan = false;
  for (let e = 0, o = 0; e < map.of.length; e++) {
    const s = scale[map.of[e]!]!;
    for (const end = o + map.unit * 4; o < end; o += 4) {
      const r = dv.getFloat32(o, true) * s;
      const m = Math.abs(r);
      if (m > max) max = m;
      else if (m !== m) nan = true;
      if (write) dv.setFloat32(o, r, true);
    }
  }
  return nan ? NaN : max;
}

/** Producer side bias: b' = s*b + t (b absent means zero). */
export function producerBias(bias: Float64Array | undefined, a: Affine): Float64Array {
  const n = a.scale.length;
  const out = new Float64Array(n);
  for (let i = 0; i < n; i++) out[i] = a.scale[i]! * (bias ? bias[i]! : 0) + a.shift[i]!;
  return out;
}

/**
 * Consumer side: Σ over input channels and kernel taps of W·t, per output channel. `outputOf` says which of
 * the first two weight axes is the output channel ('a' for Conv [Cout, ...] and transposed Gemm B, 'b' for
 * a [K, N] matrix).
 */
export function contractShift(w: Float32Array | Float64Array, v: WeightView, inMap: ChannelMap, outputOf: 'a' | 'b', outputs: number, shift: Float64Array): Float64Array {
  const out = new Float64Array(outputs);
  for (let a = 0; a < v.d0; a++) {
    for (let b = 0; b < v.d1; b++) {
      const t = shift[pairChannel(inMap, v, a * v.d1 + b)]!;
      if (t === 0) continue;
      const base = (a * v.d1 + b) * v.inner;
      let sum = 0;
      for (let k = 0; k < v.inner; k++) sum += w[base + k]!;
      out[outputOf === 'a' ? a : b] += sum * t;
    }
  }
  return out;
}

/** numpy-style broadcast of two shapes; undefined when they do not broadcast. */
export function broadcastDims(x: readonly number[], y: readonly number[]): number[] | undefined {
  const n = Math.max(x.length, y.length);
  const out: number[] = [];
  for (let i = 0; i < n; i++) {
    const a = x[x.length - n + i] ?? 1;
    const b = y[y.length - n + i] ?? 1;
    if (a !== b && a !== 1 && b !== 1) return undefined;
    out.push(a === 1 ? b : a);
  }
  return out;
}

/**
 * A Gemm bias after a fold: C'[.., n] = factor * colScale[n] * C[..] + add[n], shaped as C broadcast against
 * [N] so it still broadcasts to the output [M, N]. With no C, C' = add with dims [N].
 */
export function gemmBias(c: { values: Float64Array; dims: number[]; name?: string } | undefined, factor: number, colScale: Float64Array | undefined, add: Float64Array): { values: Float64Array; dims: number[] } {
  const n = add.length;
  if (!c) return { values: Float64Array.from(add), dims: [n] };
  const dims = broadcastDims(c.dims, [n]);
  if (!dims) throw new PleatError('bad-model', `Gemm bias '${c.name ?? ''}' of dims [${c.dims.join(',')}] does not broadcast to the layer's ${n} output columns`);
  const rank = dims.length;
  const size = dims.reduce((p, d) => p * d, 1);
  // Strides of C inside the broadcast shape (0 on broadcast axes).
  const cd = [...new Array(rank - c.dims.length).fill(1), ...c.dims];
  const strides = new Array<number>(rank).fill(0);
  let acc = 1;
  for (let i = rank - 1; i >= 0; i--) { strides[i] = cd[i] === 1 ? 0 : acc; acc *= cd[i]!; }
  const values = new Float64Array(size);
  const idx = new Array<number>(rank).fill(0);
  for (let e = 0; e < size; e++) {
    let off = 0;
    for (let i = 0; i < rank; i++) off += idx[i]! * strides[i]!;
    const col = idx[rank - 1]!;
    values[e] = factor * (colScale ? colScale[col]! : 1) * c.values[off]! + add[col]!;
    for (let i = rank - 1; i >= 0; i--) { if (++idx[i]! < dims[i]!) break; idx[i] = 0; }
  }
  return { values, dims };
}

/** Largest |v| (NaN if any is NaN). */
export function maxAbs(v: ArrayLike<number>): number {
  let max = 0;
  for (let i = 0; i < v.length; i++) {
    const m = Math.abs(v[i]!);
    if (m > max) max = m;
    else if (m !== m) return NaN;
  }
  return max;
}
