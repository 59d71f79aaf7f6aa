// The plain-gate evaluator (no mathjs) must judge exactly as the restricted mathjs gate does, including NaN,
// infinities, equal values and values one rounding apart; and anything not plain must fall through to mathjs.
import { describe, expect, it } from 'vitest';
import { BUDGET_NAMES, DEFAULT_GATES, METRIC_NAMES, parseGate } from '../../src/verify/gate.js';
import { parsePlainGate } from '../../src/verify/gate-plain.js';

const ALL = [...METRIC_NAMES, ...BUDGET_NAMES];

function rng(seed: number): () => number {
  let s = seed >>> 0;
  return () => { s = (s * 1664525 + 1013904223) >>> 0; return s / 2 ** 32; };
}

describe('plain gates', () => {
  const exprs = [
    ...Object.values(DEFAULT_GATES),
    'maxAbs < 1e-4 and cosine > 0.99999',
    'maxRel != 0.5',
    'maxAbs == 0.25 and rms >= .5',
    'maxAbs <= 2.5E-1 * peak',
    'addedAbs <= 1e-6 and deployRel < 1e-2',
  ];
  it('recognises every default gate as plain', () => {
    for (const e of Object.values(DEFAULT_GATES)) expect(parsePlainGate(e, ALL), e).toBeDefined();
  });
  it('agrees with the mathjs evaluation on seeded scopes with edge values', () => {
    const r = rng(42);
    const special = [0, 0.25, 0.5, 1e-3, 1e-9, 0.99999, 0.999999999999, 1, NaN, Infinity, -Infinity];
    let checked = 0;
    for (const expr of exprs) {
      const plain = parseGate(expr, ALL);
      const full = parseGate(expr, ALL, { plainForm: false });
      for (let i = 0; i < 400; i++) {
        const scope: Record<string, number> = {};
        for (const n of ALL) {
          const k = r();
          const base = special[Math.floor(r() * special.length)]!;
          // a special value, a value one rounding either side of it, or any value
          scope[n] = k < 0.4 ? base : k < 0.7 ? base * (1 + (r() < 0.5 ? -1 : 1) * 2 ** -52) : r() * 2;
        }
        expect(plain.test(scope), `${expr} on ${JSON.stringify(scope)}`).toBe(full.test(scope));
        checked++;
      }
    }
    expect(checked).toBe(exprs.length * 400);
  });
  it('leaves other forms, unknown names and constants to mathjs', () => {
    for (const e of ['maxAbs < 1 or cosine > 0', 'not (maxAbs > 1)', 'abs(maxAbs) < 1', 'maxAbs < Infinity', 'nosuch < 1', 'maxAbs < 1 AND rms < 1', '(maxAbs < 1)']) {
      expect(parsePlainGate(e, ALL), e).toBeUndefined();
    }
    expect(() => parseGate('nosuch < 1', ALL)).toThrow(/unknown name 'nosuch'/);
    expect(() => parseGate('ownAbs < 1', [...METRIC_NAMES])).toThrow(/not measured here/);
  });
});
