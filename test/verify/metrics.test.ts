// Metrics checked against numbers worked out by hand in the comments (the formulas are the definitions in
// src/verify/metrics.ts: maxAbs, maxRel with a floor of 1e-3 of the peak, RMS, cosine similarity).
import { describe, expect, it } from 'vitest';
import { computeMetrics, REL_FLOOR, worstOf } from '../../src/verify/metrics.js';

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
