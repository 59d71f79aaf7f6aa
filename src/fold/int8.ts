// Symmetric 8-bit weight quantization, simulated: each weight goes through QuantizeLinear then
// DequantizeLinear with zero point 0 and scale max|w| / 127 (per tensor, or per output channel), in float32
// arithmetic as a runtime does it. The rounding rules are the ONNX QuantizeLinear operator's: the quotient
// x / scale is rounded half to even, then saturated to the int8 range [-128, 127]. The signal-to-quantization-
// noise ratio (SQNR) compares the weights with their rounded copy (Nagel et al. 2019, "Data-Free Quantization
// Through Weight Equalization and Bias Correction", arXiv:1906.04721, uses it to judge per-tensor scales).
import type { ChannelMap } from './weights.js';

export type Int8Granularity = 'tensor' | 'channel';
export const INT8_GRANULARITIES: readonly Int8Granularity[] = ['tensor', 'channel'];

/** The largest code of the symmetric range: scales map max|w| to 127, so -128 is never reached from a weight. */
const QMAX = 127;

/** Round half to even (IEEE 754 roundTiesToEven), as QuantizeLinear does. */
export function roundHalfEven(x: number): number {
  const r = Math.round(x);
  // Math.round takes ties up (towards +inf): pull back the ties that landed on an odd integer (r - x is exactly
  // 0.5 only for a tie; the bit test needs an int32, so huge quotients take the general remainder test)
  if (r - x !== 0.5) return r;
  if (Math.abs(r) < 0x40000000) return (r & 1) !== 0 ? r - 1 : r;
  return r % 2 !== 0 ? r - 1 : r;
}

/** The float32 scale a symmetric quantizer gives a range of max|w| (0 when every weight is 0). */
export function symmetricScale(maxAbs: number): number {
  return Math.fround(Math.fround(maxAbs) / QMAX);
}

/** One weight through QuantizeLinear(scale, zero point 0, int8) then DequantizeLinear, in float32. */
export function quantizeDequantize(x: number, scale: number): number {
  if (scale === 0) return 0;
  // + 0 turns a -0 code into 0: an int8 has no negative zero, so neither has its dequantized value
  const q = Math.min(127, Math.max(-128, roundHalfEven(Math.fround(Math.fround(x) / scale)))) + 0;
  return Math.fround(q * scale);
}

/** max |w| of each output channel. */
export function channelMaxAbs(values: Float64Array, map: ChannelMap, channels: number): Float64Array {
  const out = new Float64Array(channels);
  for (let e = 0, i = 0; e < map.of.length; e++) {
    const c = map.of[e]!;
    let m = out[c]!;
    for (const end = i + map.unit; i < end; i++) { const a = Math.abs(values[i]!); if (a > m) m = a; }
    out[c] = m;
  }
  return out;
}

/** The scale of each output channel for a granularity (the same one everywhere for 'tensor'). */
export function channelScales(values: Float64Array, map: ChannelMap, channels: number, granularity: Int8Granularity): Float64Array {
  const maxAbs = channelMaxAbs(values, map, channels);
  if (granularity === 'channel') return maxAbs.map(symmetricScale);
  let m = 0;
  for (const a of maxAbs) if (a > m) m = a;
  return new Float64Array(channels).fill(symmetricScale(m));
}

/** The weights after 8-bit quantize-dequantize at the given granularity. */
export function roundedInt8(values: Float64Array, map: ChannelMap, channels: number, granularity: Int8Granularity): Float64Array {
  const scales = channelScales(values, map, channels, granularity);
  const out = new Float64Array(values.length);
  for (let e = 0, i = 0; e < map.of.length; e++) {
    const s = scales[map.of[e]!]!;
    for (const end = i + map.unit; i < end; i++) out[i] = quantizeDequantize(values[i]!, s);
  }
  return out;
}

/** 10 log10(signal energy / noise energy) in dB; Infinity when the rounding changed nothing. */
export function sqnrDb(signal: number, noise: number): number {
  if (noise === 0) return Infinity;
  if (signal === 0) return -Infinity;
  return 10 * Math.log10(signal / noise);
}

export interface SqnrFigures {
  /** Whole layer, one scale for the tensor. */
  tensor: number;
  /** Whole layer, one scale per output channel. */
  channel: number;
  /** The lowest SQNR of any single output channel under the per-tensor scale (where per-tensor scales starve). */
  worstChannel: number;
}

/** SQNR of a layer's weights under symmetric 8-bit quantization (float32 weights as stored). */
export function sqnrOf(values: Float64Array, map: ChannelMap, channels: number): SqnrFigures {
  // one pass over the weights, both roundings at once (a layer of millions of weights is read once, and no
  // rounded copy is made); sums taken in element order, as the two rounded copies would be read
  const maxAbs = channelMaxAbs(values, map, channels);
  const scaleC = maxAbs.map(symmetricScale);
  let m = 0;
  for (const a of maxAbs) if (a > m) m = a;
  const scaleT = symmetricScale(m);
  const sig = new Float64Array(channels), noiseT = new Float64Array(channels);
  const acc = new Float64Array(3); // signal and per-tensor noise of the run's channel, per-channel noise overall
  for (let e = 0, i = 0; e < map.of.length; e++, i += map.unit) {
    const c = map.of[e]!;
    acc[0] = sig[c]!; acc[1] = noiseT[c]!;
    noiseOfRun(values, i, i + map.unit, scaleT, scaleC[c]!, acc);
    sig[c] = acc[0]; noiseT[c] = acc[1];
  }
  return sqnrFromSums(sig, noiseT, acc[2]!);
}

/**
 * The figures from the sums: each channel's signal energy and rounding noise under the per-tensor scale, and the
 * whole layer's noise under per-channel scales.
 */
export function sqnrFromSums(sig: Float64Array, noiseT: Float64Array, noiseC: number): SqnrFigures {
  let signal = 0, noise = 0, worst = Infinity;
  for (let c = 0; c < sig.length; c++) {
    signal += sig[c]!; noise += noiseT[c]!;
    if (sig[c]! > 0) worst = Math.min(worst, sqnrDb(sig[c]!, noiseT[c]!));
  }
  return { tensor: sqnrDb(signal, noise), channel: sqnrDb(signal, noiseC), worstChannel: worst };
}

/** One 8-bit rounding, quantizeDequantize written out for the common case (a quotient within the int8 range). */
function roundTrip(x: number, scale: number): number {
  const y = Math.fround(x / scale);
  // quotients far outside the range, NaN and a zero scale take the general function
  if (!(Math.abs(y) < 1024)) return quantizeDequantize(x, scale);
  let r = Math.round(y);
  if (r - y === 0.5 && (r & 1) !== 0) r -= 1;
  return Math.fround((r > 127 ? 127 : r < -128 ? -128 : r) * scale);
}

/**
 * Add the signal and both rounding noises of weights [i, end) (one channel's run) to acc, in element order. Its
 * own small function, called once per run: the engine optimizes it after a few calls with the whole loop's type
 * feedback (one long loop in sqnrOf was optimized on the fly and thrown away again several times per layer).
 */
export function noiseOfRun(values: Float32Array | Float64Array, i: number, end: number, scaleT: number, scaleC: number, acc: Float64Array): void {
  let s = acc[0]!, nt = acc[1]!, nc = acc[2]!;
  for (; i < end; i++) {
    const x = Math.fround(values[i]!);
    s += x * x;
    const dt = x - roundTrip(x, scaleT), dc = x - roundTrip(x, scaleC);
    nt += dt * dt;
    nc += dc * dc;
  }
  acc[0] = s; acc[1] = nt; acc[2] = nc;
}
