// The scaled copies a proven fold makes of its weights (src/fold/values.ts scaleTensor, not in place): a copy's
// buffer is taken again for the next weight of its size only once its own tensor no longer holds it, so a copy
// still in use (a fold kept unproven in place, or one whose proof is running) is never written over.
import { describe, expect, it } from 'vitest';
import { DataType, type Tensor } from '../../src/graph/ir.js';
import { makeTensor, tensorToFloat64 } from '../../src/graph/tensor.js';
import { scaleTensor } from '../../src/fold/values.js';
import { randn, rng } from '../helpers/build.js';

const bytesOf = (t: Tensor) => (t.storage as { bytes: Uint8Array }).bytes;

describe('scaled copies of weights', () => {
  it('reuse a copy buffer only when its tensor has let go of it, and every value is the scaled original', () => {
    const r = rng(9);
    const n = 4 * 300, map = { of: Int32Array.from([0, 1, 2, 3]), unit: 300 }, scale = Float64Array.from([0.5, 2, -1.25, 3]);
    const make = (name: string) => makeTensor(name, [4, 300], DataType.FLOAT, randn(r, n, 1));
    const want = (t: Tensor) => Float32Array.from(tensorToFloat64(t), (x, i) => x * scale[Math.floor(i / 300)]!);
    const a = make('a'), b = make('b'), c = make('c');
    const aBefore = a.storage, aWant = want(a), bWant = want(b), cWant = want(c);
    scaleTensor(a, map, scale, false);
    const copyA = bytesOf(a);
    scaleTensor(b, map, scale, false); // a still holds its copy: b gets a buffer of its own
    expect(bytesOf(b).buffer).not.toBe(copyA.buffer);
    expect(Float32Array.from(tensorToFloat64(a))).toEqual(aWant);
    expect(Float32Array.from(tensorToFloat64(b))).toEqual(bWant);
    // b lets go of its copy (as a fold's undo does): the next copy of that size goes into b's old buffer
    const bCopy = bytesOf(b);
    b.storage = makeTensor('b', [4, 300], DataType.FLOAT, new Float32Array(n)).storage;
    scaleTensor(c, map, scale, false);
    expect(bytesOf(c).buffer).toBe(bCopy.buffer);
    expect(Float32Array.from(tensorToFloat64(c))).toEqual(cWant);
    // a's copy was never written over; a undone gets back its original storage untouched
    expect(Float32Array.from(tensorToFloat64(a))).toEqual(aWant);
    a.storage = aBefore;
    expect(Float32Array.from(tensorToFloat64(a))).toEqual(Float32Array.from(tensorToFloat64({ ...a, storage: aBefore })));
  });
});
