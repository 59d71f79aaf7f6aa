// How far one output is from a reference output. All sums run in float64 on values scaled by the larger
// magnitude, so huge outputs cannot overflow the squares.

/** Agreement of a candidate array `a` with a reference array `b` (same length). */
export interface Metrics {
  /** Largest |a - b| over elements where neither side is NaN (Infinity if some element has a NaN mismatch). */
  maxAbs: number;
  /**
   * Largest |a - b| / max(|b|, floor), with floor = REL_FLOOR * peak. Elements smaller than that share of the
   * output's largest magnitude are judged against it, so values that cross zero cannot make the ratio explode.
   * When the reference is all zeros the ratio is 0 if the candidate is too, else Infinity (across probes,
   * atOutputScale judges such a probe at the output's floor instead).
   */
  maxRel: number;
  /** Root mean square of a - b over elements where neither side is NaN. */
  rms: number;
  /** Cosine similarity of a and b as vectors; 1 when both are all zeros, 0 when only one is. */
  cosine: number;
  /** Elements where exactly one side is NaN. Positions where both are NaN agree. */
  nanMismatches: number;
  /** Largest |b|: the reference's scale, so a gate can say `maxAbs <= 1e-5 * peak`. */
  peak: number;
  /** Number of elements compared. */
  count: number;
}

/**
 * Share of the output's peak magnitude used as the denominator floor of maxRel. 1e-3 is our choice (common
 * practice for "relative to the output's scale" comparisons, not taken from a source): it is small enough that a
 * sign or scale bug on any element of meaningful size shows up as an O(1) ratio, and large enough that the
 * float32 rounding of a fold (about 1e-7 of the peak, spread over elements near zero) stays near 1e-4.
 */
export const REL_FLOOR = 1e-3;

/** Metrics of candidate `a` against reference `b`. */
export function computeMetrics(a: ArrayLike<number>, b: ArrayLike<number>): Metrics {
  if (b.length !== a.length) throw new RangeError(`computeMetrics: lengths differ (${a.length} and ${b.length})`);
  // one element type for the loops (float32 and integer values widen exactly), so they stay compiled for it
  // whatever arrays the callers pass (a loop over ArrayLike seen with several types ran several times slower)
  return metricsOf(a instanceof Float64Array ? a : Float64Array.from(a), b instanceof Float64Array ? b : Float64Array.from(b));
}

function metricsOf(a: Float64Array, b: Float64Array): Metrics {
  const n = a.length;
  let peak = 0, scale = 0, nanMismatches = 0, infMismatch = false;
  for (let i = 0; i < n; i++) {
    const x = a[i]!, y = b[i]!;
    const xn = Number.isNaN(x), yn = Number.isNaN(y);
    if (xn || yn) { if (xn !== yn) nanMismatches++; continue; }
    const ay = Math.abs(y), ax = Math.abs(x);
    if (ay > peak) peak = ay;
    if (ax !== Infinity && ax > scale) scale = ax;
    if (ay !== Infinity && ay > scale) scale = ay;
    if ((ax === Infinity || ay === Infinity) && x !== y) infMismatch = true;
  }
  const floor = REL_FLOOR * peak;
  const inv = scale > 0 ? 1 / scale : 1;
  let maxAbs = 0, maxRel = 0, sq = 0, dot = 0, na = 0, nb = 0, used = 0;
  for (let i = 0; i < n; i++) {
    const x = a[i]!, y = b[i]!;
    if (Number.isNaN(x) || Number.isNaN(y)) continue;
    used++;
    if (x === y) { // also equal infinities, whose difference would be NaN
      if (Number.isFinite(x)) { const s = x * inv; dot += s * s; na += s * s; nb += s * s; }
      continue;
    }
    const d = Math.abs(x - y);
    if (d > maxAbs) maxAbs = d;
    const den = Math.max(Math.abs(y), floor);
    const r = den > 0 ? d / den : Infinity;
    if (r > maxRel) maxRel = r;
    if (Number.isFinite(d)) {
      const ds = d * inv, xs = x * inv, ys = y * inv;
      sq += ds * ds; dot += xs * ys; na += xs * xs; nb += ys * ys;
    }
  }
  let rms = used > 0 ? Math.sqrt(sq / used) * scale : 0;
  let cosine: number;
  if (na === 0 && nb === 0) cosine = 1;
  else if (na === 0 || nb === 0) cosine = 0;
  else cosine = Math.min(1, Math.max(-1, dot / Math.sqrt(na * nb)));
  if (infMismatch) { maxAbs = Infinity; maxRel = Infinity; rms = Infinity; }
  if (nanMismatches > 0) { maxAbs = Infinity; maxRel = Infinity; }
  return { maxAbs, maxRel, rms, cosine, nanMismatches, peak, count: n };
}

/**
 * How many elements are finite numbers on both sides. Elements that are NaN (or the same infinity) on both sides
 * agree, but compare nothing: an output with none of these on any probe was not checked at all.
 */
export function finiteInBoth(a: ArrayLike<number>, b: ArrayLike<number>): number {
  let n = 0;
  for (let i = 0; i < a.length; i++) if (Number.isFinite(a[i]!) && Number.isFinite(b[i]!)) n++;
  return n;
}

/**
 * Per-probe metrics of one output, judged at the output's scale. On a probe whose reference is zero everywhere
 * (peak 0) the floor of maxRel was 0, so any difference at all made maxRel infinite and the cosine (of a zero
 * vector) 0, failing a fold whose error is far below the output's scale on every other probe. There, maxRel uses
 * the floor of the output's peak over all probes (exact: every |b| is 0 below it, so it is maxAbs / floor) and the
 * cosine, undefined against a zero vector, is left to the other probes. When every probe's reference is zero,
 * nothing changes: any difference still fails. NaN and infinity mismatches stay infinite.
 */
export function atOutputScale(list: readonly Metrics[]): Metrics[] {
  let peak = 0;
  for (const m of list) if (m.peak > peak) peak = m.peak;
  if (!(peak > 0 && Number.isFinite(peak))) return [...list];
  const floor = REL_FLOOR * peak;
  return list.map((m) => m.peak !== 0 || m.count === 0 || m.nanMismatches > 0 || !Number.isFinite(m.maxAbs)
    ? m : { ...m, maxRel: m.maxAbs / floor, cosine: 1 });
}

/** The worst of several probes' metrics: largest errors, smallest cosine, most NaN mismatches. */
export function worstOf(list: readonly Metrics[]): Metrics {
  if (list.length === 0) throw new RangeError('worstOf: no metrics');
  const w = { ...list[0]! };
  for (const m of list.slice(1)) {
    w.maxAbs = worse(w.maxAbs, m.maxAbs);
    w.maxRel = worse(w.maxRel, m.maxRel);
    w.rms = worse(w.rms, m.rms);
    w.cosine = Math.min(w.cosine, m.cosine);
    w.nanMismatches = Math.max(w.nanMismatches, m.nanMismatches);
    w.peak = Math.max(w.peak, m.peak);
    w.count = Math.max(w.count, m.count);
  }
  return w;
}

function worse(x: number, y: number): number {
  return Number.isNaN(x) || Number.isNaN(y) ? NaN : Math.max(x, y);
}

/**
 * How the element differences |a - b| of one output are spread: counts in log-spaced bins (BINS_PER_DECADE per
 * power of ten), so a report can draw them without keeping the elements. Bounded: the bins run from
 * 10^HIST_MIN_EXP to 10^HIST_MAX_EXP; a difference below the first edge is counted in the first bin, one above
 * the last edge in the last bin. Equal elements (both NaN included) count as `zero`; a difference that is not a
 * finite number (NaN on one side only, or unequal infinities) counts as `nonFinite`.
 */
export interface DiffHistogram {
  binsPerDecade: number;
  /** counts[i] holds differences in [10^((first + i) / binsPerDecade), 10^((first + i + 1) / binsPerDecade)). */
  first: number;
  counts: number[];
  zero: number;
  nonFinite: number;
  /** Largest |reference| over the elements binned (the scale the differences are judged against). */
  peak: number;
}

export const BINS_PER_DECADE = 4;
const HIST_MIN_EXP = -30, HIST_MAX_EXP = 10;
const BIN_LO = HIST_MIN_EXP * BINS_PER_DECADE, BIN_HI = HIST_MAX_EXP * BINS_PER_DECADE - 1;

/** Bin index (in units of 1/BINS_PER_DECADE decade) of a positive finite difference, clamped to the bounds. */
export function diffBin(d: number): number {
  let k = Math.floor(Math.log10(d) * BINS_PER_DECADE);
  // log10 rounds: make sure the bin's lower edge is <= d < its upper edge
  if (10 ** (k / BINS_PER_DECADE) > d) k--;
  else if (10 ** ((k + 1) / BINS_PER_DECADE) <= d) k++;
  return Math.min(BIN_HI, Math.max(BIN_LO, k));
}

/** Add the differences of candidate `a` against reference `b` to a histogram (new one when `into` is absent). */
export function diffHistogram(a: ArrayLike<number>, b: ArrayLike<number>, into?: DiffHistogram): DiffHistogram {
  const bins = new Map<number, number>();
  const h = into ?? { binsPerDecade: BINS_PER_DECADE, first: 0, counts: [], zero: 0, nonFinite: 0, peak: 0 };
  h.counts.forEach((c, i) => { if (c) bins.set(h.first + i, c); });
  for (let i = 0; i < a.length; i++) {
    const x = a[i]!, y = b[i]!;
    const xn = Number.isNaN(x), yn = Number.isNaN(y);
    if (!yn && Math.abs(y) > h.peak && Number.isFinite(y)) h.peak = Math.abs(y);
    if (x === y || (xn && yn)) { h.zero++; continue; }
    const d = Math.abs(x - y);
    if (!Number.isFinite(d)) { h.nonFinite++; continue; }
    const k = diffBin(d);
    bins.set(k, (bins.get(k) ?? 0) + 1);
  }
  const keys = [...bins.keys()];
  if (keys.length === 0) { h.first = 0; h.counts = []; return h; }
  const lo = Math.min(...keys), hi = Math.max(...keys);
  h.first = lo;
  h.counts = Array.from({ length: hi - lo + 1 }, (_, i) => bins.get(lo + i) ?? 0);
  return h;
}
