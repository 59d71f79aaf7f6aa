// Broadcasting helpers against the shape rules and examples of the ONNX Broadcasting.md document
// (multidirectional broadcasting), and element placement against a direct index computation.
import { describe, expect, it } from 'vitest';
import { broadcastBinary, broadcastIndex, broadcastNary, broadcastShape, expandTo } from '../../src/eval/broadcast.js';
import { rng } from '../helpers/build.js';
import { isPleatError } from '../../src/errors.js';

describe('broadcastShape (ONNX Broadcasting.md examples)', () => {
  it('documented compatible shapes', () => {
    expect(broadcastShape([[2, 3, 4, 5], []], 'n')).toEqual([2, 3, 4, 5]);
    expect(broadcastShape([[2, 3, 4, 5], [5]], 'n')).toEqual([2, 3, 4, 5]);
    expect(broadcastShape([[4, 5], [2, 3, 4, 5]], 'n')).toEqual([2, 3, 4, 5]);
    expect(broadcastShape([[1, 4, 5], [2, 3, 1, 1]], 'n')).toEqual([2, 3, 4, 5]);
    expect(broadcastShape([[3, 4, 5], [2, 1, 1, 1]], 'n')).toEqual([2, 3, 4, 5]);
  });
  it('incompatible shapes are a one-line bad-model error naming the node', () => {
    let e: unknown;
    try { broadcastShape([[2, 3], [4]], "node 'add_7'"); } catch (x) { e = x; }
    expect(isPleatError(e) && e.kind === 'bad-model').toBe(true);
    expect((e as Error).message).toContain('add_7');
  });
});

describe('element placement', () => {
  const flat = (idx: number[], dims: number[]) => idx.reduce((a, v, i) => a * dims[i]! + v, 0);
  function naive(aDims: number[], bDims: number[], out: number[], a: Float64Array, b: Float64Array): Float64Array {
    const n = out.reduce((x, y) => x * y, 1), res = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      const idx: number[] = []; let r = i;
      for (let ax = out.length - 1; ax >= 0; ax--) { idx.unshift(r % out[ax]!); r = Math.floor(r / out[ax]!); }
      const pick = (d: number[]) => flat(d.map((s, k) => (s === 1 ? 0 : idx[out.length - d.length + k]!)), d);
      res[i] = a[pick(aDims)]! * 10 + b[pick(bDims)]!;
    }
    return res;
  }
  it('random shape pairs: broadcastBinary, broadcastNary, broadcastIndex and expandTo agree with direct indexing', () => {
    const r = rng(17);
    for (let t = 0; t < 200; t++) {
      const rank = Math.floor(r() * 5);
      const out = Array.from({ length: rank }, () => 1 + Math.floor(r() * 4));
      const sub = () => { const k = Math.floor(r() * (rank + 1)); return out.slice(rank - k).map((d) => (r() < 0.4 ? 1 : d)); };
      const aDims = sub(), bDims = sub();
      const want = broadcastShape([aDims, bDims], 't');
      const a = Float64Array.from({ length: aDims.reduce((x, y) => x * y, 1) }, () => Math.floor(r() * 9));
      const b = Float64Array.from({ length: bDims.reduce((x, y) => x * y, 1) }, () => Math.floor(r() * 9));
      const ref = naive(aDims, bDims, want, a, b);
      const got = new Float64Array(ref.length);
      broadcastBinary(a, aDims, b, bDims, (x, y) => x * 10 + y, got, want);
      expect(Array.from(got)).toEqual(Array.from(ref));
      const got2 = new Float32Array(ref.length);
      broadcastNary([{ data: a, dims: aDims }, { data: b, dims: bDims }], (v) => v[0]! * 10 + v[1]!, got2, want);
      expect(Array.from(got2)).toEqual(Array.from(ref));
      const ia = broadcastIndex(aDims, want), ex = new Float64Array(ref.length);
      expandTo(a, aDims, ex, want);
      expect(Array.from(ex)).toEqual(Array.from(ia, (i) => a[i]!));
    }
  });
});
