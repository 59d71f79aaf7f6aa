// Metrics checked against numbers worked out by hand in the comments (the formulas are the definitions in
// src/verify/metrics.ts: maxAbs, maxRel with a floor of 1e-3 of the peak, RMS, cosine similarity).
import { describe, expect, it } from 'vitest';
import { atOutputScale, BINS_PER_DECADE, computeMetrics, diffBin, diffHistogram, REL_FLOOR, worstOf } from '../../src/verify/metrics.js';

describe('computeMetrics', () => {
  it('matches hand-computed values on a small vector', () => {
    // a = [1, 2, 3, 4], b = [1, 2.5, 2, 4]: differences [0, 0.5, 1, 0]
    const m = computeMetrics([1, 2, 3, 4], [1, 2.5, 2, 4]);
    expect(m.maxAbs).toBe(1);
    // per element |d| / |b|: 0, 0.5/2.5 = 0.2, 1/2 = 0.5, 0 -> 0.5 (floor 1e-3 * 4 = 0.004 is below every |b|)
    expect(m.maxRel).toBeCloseTo(0.5, 15);
    // rms = sqrt((0 + 0.25 + 1 + 0) / 4) = sqrt(0.3125)
    expect(m.rms).toBeCloseTo(Math.sqrt(0.3125), 15);
    // cosine = (1 + 5 + 6 + 16) / (sqrt(1+4+9+16) * sqrt(1+6.25+4+16)) = 28 / (sqrt(30) * sqrt(27.25))
    expect(m.cosine).toBeCloseTo(28 / (Math.sqrt(30) * Math.sqrt(27.25)), 14);
    expect(m.peak).toBe(4);
    expect(m.count).toBe(4);
    expect(m.nanMismatches).toBe(0);
  });

  it('uses the floor for elements near zero', () => {
    // b = [1000, 0.001], a = [1000, 0.002]: |d| = 0.001 at b = 0.001; floor = 1e-3 * 1000 = 1
    // -> maxRel = 0.001 / max(0.001, 1) = 0.001, where a bare ratio would say 1.0
    const m = computeMetrics([1000, 0.002], [1000, 0.001]);
    expect(REL_FLOOR).toBe(1e-3);
    expect(m.maxRel).toBeCloseTo(0.001, 15);
  });

  it('identical arrays give zeros and cosine 1; both all-zero gives cosine 1; one all-zero gives 0', () => {
    const same = computeMetrics([3, -1, 0.5], [3, -1, 0.5]);
    expect([same.maxAbs, same.maxRel, same.rms, same.cosine]).toEqual([0, 0, 0, 1]);
    expect(computeMetrics([0, 0], [0, 0]).cosine).toBe(1);
    expect(computeMetrics([0, 0], [0, 0]).maxRel).toBe(0);
    const oneZero = computeMetrics([1, 0], [0, 0]);
    expect(oneZero.cosine).toBe(0);
    expect(oneZero.maxRel).toBe(Infinity); // relative error against an all-zero reference is unbounded
    expect(oneZero.maxAbs).toBe(1);
  });

  it('opposite vectors have cosine -1', () => {
    expect(computeMetrics([1, -2], [-1, 2]).cosine).toBeCloseTo(-1, 15);
  });

  it('counts NaN mismatches and makes maxAbs/maxRel infinite, but NaN on both sides agrees', () => {
    const m = computeMetrics([NaN, 1, NaN, 2], [NaN, 1, 5, 2]);
    expect(m.nanMismatches).toBe(1);
    expect(m.maxAbs).toBe(Infinity);
    expect(m.maxRel).toBe(Infinity);
    const both = computeMetrics([NaN, 1], [NaN, 1]);
    expect(both.nanMismatches).toBe(0);
    expect(both.maxAbs).toBe(0);
  });

  it('equal infinities agree; an infinity against a finite value is an infinite error', () => {
    expect(computeMetrics([Infinity, 1], [Infinity, 1]).maxAbs).toBe(0);
    const m = computeMetrics([Infinity, 1], [3, 1]);
    expect(m.maxAbs).toBe(Infinity);
    expect(m.rms).toBe(Infinity);
  });

  it('does not overflow on huge values', () => {
    // a = [3e200, 4e200], b = [3e200, 4.0000001e200]: cosine close to 1, rms = 1e193 / sqrt(2)
    const m = computeMetrics([3e200, 4e200], [3e200, 4.0000001e200]);
    expect(m.cosine).toBeGreaterThan(0.999999999);
    expect(m.rms / (1e193 / Math.SQRT2)).toBeCloseTo(1, 6);
  });

  it('worstOf takes the largest errors and the smallest cosine', () => {
    const w = worstOf([computeMetrics([1, 2], [1, 2.5]), computeMetrics([1, 0], [1, 1])]);
    // first: maxAbs 0.5, rms sqrt(0.125), cosine (1+5)/(sqrt5*sqrt7.25); second: maxAbs 1, rms sqrt(0.5), cosine 1/sqrt2
    expect(w.maxAbs).toBe(1);
    expect(w.rms).toBeCloseTo(Math.sqrt(0.5), 15);
    expect(w.cosine).toBeCloseTo(1 / Math.SQRT2, 15);
    expect(w.maxRel).toBeCloseTo(1, 15);
  });
});

describe('diffHistogram', () => {
  // seeded generator (mulberry32), so the cases are the same on every run
  const rng = (seed: number) => () => {
    seed = (seed + 0x6d2b79f5) | 0;
    let t = Math.imul(seed ^ (seed >>> 15), 1 | seed);
    t = (t + Math.imul(t ^ (t >>> 7), 61 | t)) ^ t;
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296;
  };

  it('every element lands in exactly one place, each bin holds only differences inside its edges, and the top bin holds maxAbs', () => {
    for (let seed = 1; seed <= 20; seed++) {
      const r = rng(seed);
      const n = 50 + Math.floor(r() * 400);
      const b = Float64Array.from({ length: n }, () => (r() - 0.5) * 10 ** Math.floor(r() * 6 - 3));
      // differences over many decades, some elements exactly equal
      const a = b.map((y) => (r() < 0.1 ? y : y + (r() - 0.5) * 10 ** Math.floor(r() * 14 - 12)));
      const h = diffHistogram(a, b);
      expect(h.binsPerDecade).toBe(BINS_PER_DECADE);
      expect(h.counts.reduce((s, c) => s + c, 0) + h.zero + h.nonFinite).toBe(n);
      const expected = new Map<number, number>();
      for (let i = 0; i < n; i++) {
        const d = Math.abs(a[i]! - b[i]!);
        if (d === 0) continue;
        const k = diffBin(d);
        expect(10 ** (k / BINS_PER_DECADE)).toBeLessThanOrEqual(d);
        expect(d).toBeLessThan(10 ** ((k + 1) / BINS_PER_DECADE));
        expected.set(k, (expected.get(k) ?? 0) + 1);
      }
      h.counts.forEach((c, i) => expect(c).toBe(expected.get(h.first + i) ?? 0));
      const top = h.first + h.counts.length - 1;
      const maxAbs = computeMetrics(a, b).maxAbs;
      expect(diffBin(maxAbs)).toBe(top);
      expect(h.counts[0]).toBeGreaterThan(0);
      expect(h.peak).toBe(computeMetrics(a, b).peak);
    }
  });

  it('adding probes one by one gives the histogram of all of them', () => {
    const r = rng(7);
    const b = Float64Array.from({ length: 300 }, () => r() * 4 - 2);
    const a = b.map((y) => y + (r() - 0.5) * 10 ** Math.floor(r() * 8 - 9));
    const whole = diffHistogram(a, b);
    const parts = diffHistogram(a.subarray(150), b.subarray(150), diffHistogram(a.subarray(0, 150), b.subarray(0, 150)));
    expect(parts).toEqual(whole);
  });

  it('equal elements (NaN on both sides too) count as zero; a NaN on one side or unequal infinities as not finite; bounds clamp', () => {
    const h = diffHistogram([1, NaN, NaN, Infinity, 5, 1e-40, 1e30], [1, NaN, 2, -Infinity, 5, 0, 0]);
    expect(h.zero).toBe(3);
    expect(h.nonFinite).toBe(2);
    // 1e-40 is below the lowest edge (1e-30) and 1e30 above the highest (1e10): both kept, in the end bins
    expect(h.first).toBe(-30 * BINS_PER_DECADE);
    expect(h.counts[0]).toBe(1);
    expect(h.counts.at(-1)).toBe(1);
    expect(h.first + h.counts.length).toBe(10 * BINS_PER_DECADE);
  });
});

// A probe whose reference output is zero everywhere: its maxRel is judged against the floor of the output's peak
// over all probes (every |b| is below that floor, so maxRel = maxAbs / floor exactly) and its cosine, undefined
// against a zero vector, is left to the other probes. Checked on seeded random probes against the definition
// evaluated element by element with the output's floor.
describe('atOutputScale', () => {
  const rng = (seed: number) => () => { seed = (seed * 1664525 + 1013904223) >>> 0; return seed / 2 ** 32; };
  for (const seed of [1, 2, 3, 4, 5]) {
    it(`a zero-reference probe's maxRel is the definition at the output's floor (seed ${seed})`, () => {
      const r = rng(seed);
      const n = 5 + Math.floor(r() * 20);
      const probes = Array.from({ length: 4 }, (_, p) => {
        const zero = p === 1 || (p > 1 && r() < 0.3); // probe 0 never, probe 1 always has a zero reference
        const b = Array.from({ length: n }, () => (zero ? 0 : (r() - 0.5) * 10));
        const a = b.map((v) => v + (r() - 0.5) * 1e-6);
        return { a, b, zero };
      });
      const list = probes.map((p) => computeMetrics(p.a, p.b));
      const peak = Math.max(...probes.flatMap((p) => p.b.map(Math.abs)));
      const got = atOutputScale(list);
      probes.forEach((p, k) => {
        if (!p.zero) { expect(got[k]).toBe(list[k]); return; }
        const floor = REL_FLOOR * peak;
        const want = Math.max(...p.a.map((x, i) => Math.abs(x - p.b[i]!) / Math.max(Math.abs(p.b[i]!), floor)));
        expect(got[k]!.maxRel).toBeCloseTo(want, 12);
        expect(got[k]!.cosine).toBe(1);
        expect(list[k]!.maxRel).toBe(Infinity); // as it was: the floor of a zero peak is 0
      });
      expect(worstOf(got).maxRel).toBeLessThan(1e-3);
    });
  }

  it('changes nothing when every probe is zero, or on a NaN mismatch', () => {
    const allZero = [computeMetrics([1e-9, 0], [0, 0]), computeMetrics([0, 0], [0, 0])];
    expect(atOutputScale(allZero)).toEqual(allZero);
    expect(worstOf(atOutputScale(allZero)).maxRel).toBe(Infinity);
    const nan = [computeMetrics([NaN, 0], [0, 0]), computeMetrics([1, 2], [1, 2])];
    expect(atOutputScale(nan)[0]).toBe(nan[0]);
  });
});
