// The per-channel affine map y -> scale*y + shift that an inference-mode normalization (or a per-channel
// constant Add/Sub/Mul/Div) applies, built and composed in float64.
//
// BatchNormalization at inference (ONNX Operators, BatchNormalization: Y = (X - mean) / sqrt(var + epsilon)
// * scale + B; Ioffe & Szegedy 2015, arXiv:1502.03167) is that map with
//   scale' = gamma / sqrt(var + epsilon),   shift' = beta - mean * scale'.
import { PleatError } from '../errors.js';

export interface Affine {
  scale: Float64Array;
  shift: Float64Array;
}

export function identityAffine(channels: number): Affine {
  return { scale: new Float64Array(channels).fill(1), shift: new Float64Array(channels) };
}

export function batchNormAffine(
  gamma: ArrayLike<number>, beta: ArrayLike<number>, mean: ArrayLike<number>, variance: ArrayLike<number>, epsilon: number,
): Affine {
  const c = gamma.length;
  const scale = new Float64Array(c);
  const shift = new Float64Array(c);
  for (let i = 0; i < c; i++) {
    const s = gamma[i]! / Math.sqrt(variance[i]! + epsilon);
    scale[i] = s;
    shift[i] = beta[i]! - mean[i]! * s;
  }
  return { scale, shift };
}

export type ElementwiseOp = 'Add' | 'Sub' | 'Mul' | 'Div';

/**
 * The affine map of `x op c` (or `c op x` when constOnLeft) for a per-channel constant c. Returns undefined
 * for c / x, which is not affine in x.
 */
export function elementwiseAffine(op: ElementwiseOp, constOnLeft: boolean, c: ArrayLike<number>): Affine | undefined {
  const n = c.length;
  const scale = new Float64Array(n).fill(1);
  const shift = new Float64Array(n);
  switch (op) {
    case 'Add': for (let i = 0; i < n; i++) shift[i] = c[i]!; break;
    case 'Sub':
      if (constOnLeft) for (let i = 0; i < n; i++) { scale[i] = -1; shift[i] = c[i]!; }
      else for (let i = 0; i < n; i++) shift[i] = -c[i]!;
      break;
    case 'Mul': for (let i = 0; i < n; i++) scale[i] = c[i]!; break;
    case 'Div':
      if (constOnLeft) return undefined;
      for (let i = 0; i < n; i++) scale[i] = 1 / c[i]!;
      break;
  }
  return { scale, shift };
}

/** Repeat a one-channel map over `channels` channels (a scalar constant applies to every channel). */
export function broadcastAffine(a: Affine, channels: number): Affine {
  if (a.scale.length === channels) return a;
  if (a.scale.length !== 1) throw new PleatError('bad-model', `a per-channel constant of ${a.scale.length} values cannot cover ${channels} channels`);
  return { scale: new Float64Array(channels).fill(a.scale[0]!), shift: new Float64Array(channels).fill(a.shift[0]!) };
}

/** `second` applied after `first`: y -> s2*(s1*y + t1) + t2. */
export function composeAffine(first: Affine, second: Affine): Affine {
  const n = Math.max(first.scale.length, second.scale.length);
  const a = broadcastAffine(first, n);
  const b = broadcastAffine(second, n);
  const scale = new Float64Array(n);
  const shift = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    scale[i] = b.scale[i]! * a.scale[i]!;
    shift[i] = b.scale[i]! * a.shift[i]! + b.shift[i]!;
  }
  return { scale, shift };
}

export function hasShift(a: Affine): boolean {
  for (let i = 0; i < a.shift.length; i++) if (a.shift[i] !== 0) return true;
  return false;
}

export function hasScale(a: Affine): boolean {
  for (let i = 0; i < a.scale.length; i++) if (a.scale[i] !== 1) return true;
  return false;
}

/**
 * Where a constant's varying axis is, counted from the last axis (0 = last), after numpy-style broadcasting:
 * `null` for a scalar-like constant (every dim 1), undefined when more than one axis varies (not per-channel).
 */
export function channelAxisFromEnd(constDims: readonly number[]): number | null | undefined {
  let found: number | null = null;
  for (let i = 0; i < constDims.length; i++) {
    if (constDims[i] === 1) continue;
    if (found !== null) return undefined;
    found = constDims.length - 1 - i;
  }
  return found;
}

/**
 * Whether a constant of `constDims` broadcast against a tensor of rank `rank` (undefined = unknown) is
 * per-channel along `axisFromEnd` with `channels` channels, without changing the tensor's shape. With an
 * unknown rank only constants of rank <= `minRank` are accepted, since a longer one could add axes.
 */
export function fitsChannelAxis(constDims: readonly number[], rank: number | undefined, axisFromEnd: number, channels: number, minRank = 1): boolean {
  if (rank === undefined ? constDims.length > minRank : constDims.length > rank) return false;
  const at = channelAxisFromEnd(constDims);
  if (at === undefined) return false;
  if (at === null) return true;
  return at === axisFromEnd && constDims[constDims.length - 1 - at] === channels;
}
