// Gates: parsing, the allow-list, exact comparisons, and the default gates. Numbers in scopes are made up
// for the test; the default thresholds are pleat's own (common practice, documented in src/verify/gate.ts).
import { describe, expect, it } from 'vitest';
import { DEFAULT_GATES, defaultGateFor, gateMath, METRIC_NAMES, parseGate } from '../../src/verify/gate.js';
import { computeMetrics } from '../../src/verify/metrics.js';
import { DataType } from '../../src/graph/ir.js';
import { PleatError } from '../../src/errors.js';

function usage(expr: string, available?: string[]): string {
  try { parseGate(expr, available); } catch (e) {
    expect(e).toBeInstanceOf(PleatError);
    expect((e as PleatError).kind).toBe('usage');
    expect((e as PleatError).message).not.toContain('\n');
    expect((e as PleatError).message).toContain(`gate '${expr}'`);
    return (e as PleatError).message;
  }
  throw new Error(`gate '${expr}' was accepted`);
}

describe('parseGate', () => {
  it('evaluates comparisons with and/or/not', () => {
    const g = parseGate('maxRel <= 1e-4 and cosine >= 0.99999');
    expect(g.names).toEqual(['cosine', 'maxRel']);
    expect(g.test({ maxRel: 5e-5, cosine: 0.999995 })).toBe(true);
    expect(g.test({ maxRel: 2e-4, cosine: 0.999995 })).toBe(false);
    expect(g.test({ maxRel: 5e-5, cosine: 0.9999 })).toBe(false);
    const h = parseGate('not (maxAbs > 1) or nanMismatches == 0');
    expect(h.test({ maxAbs: 2, nanMismatches: 0 })).toBe(true);
    expect(h.test({ maxAbs: 2, nanMismatches: 3 })).toBe(false);
    expect(parseGate('maxAbs <= 1e-3 * peak').test({ maxAbs: 0.004, peak: 5 })).toBe(true); // 0.004 <= 0.005
    expect(parseGate('max(maxAbs, rms) < 0.1').test({ maxAbs: 0.05, rms: 0.2 })).toBe(false);
  });

  it('compares exactly (mathjs defaults would call 1e-16 <= 1e-20 true)', () => {
    expect(parseGate('maxAbs <= 1e-20').test({ maxAbs: 1e-16 })).toBe(false);
    expect(parseGate('maxAbs == 0').test({ maxAbs: 1e-300 })).toBe(false);
    expect(parseGate('maxAbs == 0').test({ maxAbs: 0 })).toBe(true);
  });

  it('an infinite or NaN metric fails an upper bound', () => {
    expect(parseGate('maxRel <= 1e-4').test({ maxRel: Infinity })).toBe(false);
    expect(parseGate('maxRel <= 1e-4').test({ maxRel: NaN })).toBe(false);
    expect(parseGate('maxRel < Infinity').test({ maxRel: 3 })).toBe(true);
  });

  it('rejects syntax errors, unknown names, assignments, function definitions and other constructs', () => {
    expect(usage('maxRel <= ')).toMatch(/does not parse/);
    expect(usage('maxrel <= 1')).toMatch(/unknown name 'maxrel'/);
    expect(usage('maxAbs = 1')).toMatch(/assigns/);
    expect(usage('f(x) = 1')).toMatch(/assigns/);
    expect(usage('evaluate("1")')).toMatch(/calls 'evaluate'/);
    expect(usage('import({}, {})')).toMatch(/calls 'import'/);
    expect(usage('createUnit("foo")')).toMatch(/calls 'createUnit'/);
    expect(usage('maxAbs < 5 cm')).toMatch(/unknown name 'cm'/);
    expect(usage('maxAbs to cm')).toMatch(/operator 'to'/);
    expect(usage('[1, 2]')).toMatch(/array/);
    expect(usage('maxAbs; maxRel')).toMatch(/block/);
    expect(usage('maxAbs < "1"')).toMatch(/only numbers/);
    expect(usage('maxAbs')).toMatch(/true or false/);
    expect(usage('')).toMatch(/empty/);
  });

  it('budget names are refused where no budget is measured', () => {
    expect(usage('addedRel <= 1e-6', [...METRIC_NAMES])).toMatch(/'addedRel', which is not measured here/);
    expect(parseGate('addedRel <= ownRel').test({ addedRel: 1e-7, ownRel: 1e-6 })).toBe(true);
  });

  it('a missing metric at test time is an error, not a pass', () => {
    expect(() => parseGate('rms < 1').test({})).toThrow(/needs 'rms'/);
  });

  it('the restricted instance blocks import and evaluate', () => {
    expect(() => gateMath().evaluate('1 + 1')).toThrow(/disabled/);
    expect(() => gateMath().import({}, {})).toThrow(/disabled/);
  });
});

describe('default gates', () => {
  it('all parse and are chosen by element type', () => {
    for (const expr of Object.values(DEFAULT_GATES)) parseGate(expr);
    expect(defaultGateFor(DataType.FLOAT)).toBe(DEFAULT_GATES.float32);
    expect(defaultGateFor(DataType.DOUBLE)).toBe(DEFAULT_GATES.float64);
    expect(defaultGateFor(DataType.FLOAT16)).toBe(DEFAULT_GATES.float16);
    expect(defaultGateFor(DataType.BFLOAT16)).toBe(DEFAULT_GATES.bfloat16);
    expect(defaultGateFor(DataType.INT64)).toBe(DEFAULT_GATES.exact);
    expect(defaultGateFor(DataType.BOOL)).toBe(DEFAULT_GATES.exact);
  });

  it('float32: rounding every element to float32 passes; a 1e-2 relative error on one element fails', () => {
    const b = Float64Array.from({ length: 1000 }, (_, i) => Math.sin(i) * 10);
    const rounded = Float64Array.from(b, Math.fround);
    const gate = parseGate(DEFAULT_GATES.float32);
    expect(gate.test({ ...computeMetrics(rounded, b) })).toBe(true);
    const bad = Float64Array.from(rounded);
    bad[17] = bad[17]! * 1.01;
    expect(gate.test({ ...computeMetrics(bad, b) })).toBe(false);
    const nan = Float64Array.from(rounded);
    nan[3] = NaN;
    expect(gate.test({ ...computeMetrics(nan, b) })).toBe(false);
  });

  it('integer outputs must match exactly', () => {
    const gate = parseGate(DEFAULT_GATES.exact);
    expect(gate.test({ ...computeMetrics([1, 2, 3], [1, 2, 3]) })).toBe(true);
    expect(gate.test({ ...computeMetrics([1, 2, 4], [1, 2, 3]) })).toBe(false);
  });
});

describe('gate limits (the bounds a report draws)', () => {
  const scope = { maxAbs: 1e-6, maxRel: 1e-7, rms: 1e-7, cosine: 1, nanMismatches: 0, peak: 20, count: 10 };
  it('read the bound on maxAbs or maxRel from comparisons joined by and, either way round, evaluated on the metrics', () => {
    expect(parseGate(DEFAULT_GATES.float32).limits(scope)).toEqual([{ metric: 'maxRel', limit: 1e-3 }]);
    expect(parseGate(DEFAULT_GATES.float16).limits(scope)).toEqual([{ metric: 'maxAbs', limit: 1e-2 * 20 }]);
    expect(parseGate(DEFAULT_GATES.exact).limits(scope)).toEqual([{ metric: 'maxAbs', limit: 0 }]);
    expect(parseGate('(1e-4 > maxAbs) and (maxRel < 2e-3 and cosine > 0.9)').limits(scope))
      .toEqual([{ metric: 'maxAbs', limit: 1e-4 }, { metric: 'maxRel', limit: 2e-3 }]);
  });
  it('give no bound where the expression does not bound the metric on its own', () => {
    expect(parseGate('maxAbs <= 1e-4 or cosine > 0.99').limits(scope)).toEqual([]);
    expect(parseGate('not (maxAbs > 1e-4)').limits(scope)).toEqual([]);
    expect(parseGate('maxAbs >= 1e-9').limits(scope)).toEqual([]); // a lower bound
    expect(parseGate('maxAbs <= maxRel * peak').limits(scope)).toEqual([]); // depends on the other metric
    expect(parseGate('cosine >= 0.999').limits(scope)).toEqual([]);
  });
  it('the plain form (no expression library) and the mathjs form give the same bounds', () => {
    const gates = [...Object.values(DEFAULT_GATES), 'maxAbs < 3e-5 * peak and maxRel <= 0.01', 'maxAbs >= 1e-9', 'cosine >= 0.999', 'maxAbs == 0 and maxRel < 1'];
    for (const g of gates) {
      expect(parseGate(g).limits(scope), g).toEqual(parseGate(g, undefined, { plainForm: false }).limits(scope));
    }
    expect(parseGate('maxAbs < 3e-5 * peak and maxRel <= 0.01').limits(scope)).toEqual([{ metric: 'maxAbs', limit: 3e-5 * 20 }, { metric: 'maxRel', limit: 0.01 }]);
  });
});
