// The name table behind the use-def index must give exactly what a Map would: checked against a JS Map on
// seeded random names (colliding hashes included: short names over a tiny alphabet repeat often).
import { describe, expect, it } from 'vitest';
import { nameTable } from '../../src/graph/names.js';
import { rng } from '../helpers/build.js';

describe('name table', () => {
  for (const seed of [1, 2, 3]) {
    it(`assigns the same ids as a Map in order of first sight (seed ${seed})`, () => {
      const r = rng(seed);
      const pool = Array.from({ length: 3000 }, () => {
        const len = 1 + Math.floor(r() * 6);
        let s = '';
        for (let i = 0; i < len; i++) s += 'ab/é_0'[Math.floor(r() * 6)];
        return s;
      });
      const t = nameTable(pool.length);
      const m = new Map<string, number>();
      for (const s of pool) {
        if (!m.has(s)) m.set(s, m.size);
        expect(t.add(s)).toBe(m.get(s));
      }
      expect(t.size).toBe(m.size);
      for (const s of pool) expect(t.id(s)).toBe(m.get(s));
      expect(t.id('not-there')).toBe(-1);
      expect(t.id('')).toBe(m.has('') ? m.get('') : -1);
    });
  }

  for (const seed of [4, 5]) {
    it(`a growing table started small assigns the same ids as a Map (seed ${seed})`, () => {
      const r = rng(seed);
      const t = nameTable(1, true);
      const m = new Map<string, number>();
      for (let k = 0; k < 20000; k++) {
        const s = `${'ab/é_0'[Math.floor(r() * 6)]}${Math.floor(r() * 8000)}`;
        if (!m.has(s)) m.set(s, m.size);
        expect(t.add(s)).toBe(m.get(s));
      }
      expect(t.size).toBe(m.size);
      for (const [s, id] of m) { expect(t.id(s)).toBe(id); expect(t.nameOf(id)).toBe(s); }
      expect(t.id('not-there')).toBe(-1);
    });
  }

  it('refuses more names than its capacity (a caller bug, not silent corruption)', () => {
    const t = nameTable(2);
    t.add('a'); t.add('b');
    expect(t.add('a')).toBe(0);
    expect(() => t.add('c')).toThrow(/capacity/);
  });
});
