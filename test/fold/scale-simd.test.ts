// Scaling float32 weights by channel in SIMD (src/fold/scale-simd.ts, through scaleFloat32Block) against the
// scalar definition written out here: each weight times its channel's float64 factor, rounded once to float32
// (what storing into a Float32Array does, IEEE 754 round to nearest even), and the largest |product| before that
// rounding, NaN when some product is NaN. Seeded blocks starting mid-run, runs whose length is not a multiple of
// four, NaN, infinities, subnormals and products past the float32 range.
import { describe, expect, it } from 'vitest';
import { scaleFloat32Block } from '../../src/fold/values.js';
import { simdScratch } from '../../src/fold/scale-simd.js';
import { randn, rng } from '../helpers/build.js';

function reference(f: Float32Array, first: number, of: Int32Array, unit: number, scale: Float64Array, write: boolean): number {
  let max = 0, nan = false;
  for (let j = 0; j < f.length; j++) {
    const r = f[j]! * scale[of[Math.floor((first + j) / unit)]!]!;
    if (write) f[j] = r;
    const m = Math.abs(r);
    if (m > max) max = m; else if (m !== m) nan = true;
  }
  return nan ? NaN : max;
}

describe('scaling float32 weights in SIMD', () => {
  it('gives the bits and the largest product of the scalar definition', () => {
    const r = rng(41);
    for (let trial = 0; trial < 60; trial++) {
      const unit = 64 + Math.floor(r() * 300), runs = 2 + Math.floor(r() * 6);
      const of = Int32Array.from({ length: runs }, (_, e) => (e * 7) % runs);
      const scale = Float64Array.from(randn(r, runs, 3), (x, c) => (c === 1 && trial % 5 === 0 ? 1e39 : x));
      const first = Math.floor(r() * unit);
      const n = Math.min(runs * unit - first, 1 + Math.floor(r() * (runs * unit - first)));
      const values = Float32Array.from(randn(r, n, 1));
      if (trial % 3 === 0) { values[Math.floor(r() * n)] = NaN; values[Math.floor(r() * n)] = Infinity; values[Math.floor(r() * n)] = 1e-44; }
      for (const write of [true, false]) {
        const mine = values.slice(), want = values.slice();
        const bytes = new Uint8Array(mine.buffer);
        const got = scaleFloat32Block(bytes, first, { of, unit }, scale, write);
        const exp = reference(want, first, of, unit, scale, write);
        expect(Object.is(got, exp) || got === exp, `trial ${trial} write ${write}: ${got} vs ${exp}`).toBe(true);
        expect(Buffer.from(mine.buffer).equals(Buffer.from(want.buffer)), `trial ${trial} write ${write}`).toBe(true);
      }
    }
  });

  it('gives the same on blocks lying in the kernel\'s own memory (scaled where they lie, as the writer streams them)', () => {
    const r = rng(47);
    for (let trial = 0; trial < 30; trial++) {
      const unit = [64, 4099, 40000, 70001][trial % 4]! + Math.floor(r() * 50), runs = 2 + Math.floor(r() * 4);
      const of = Int32Array.from({ length: runs }, (_, e) => (e * 3) % runs);
      const scale = Float64Array.from(randn(r, runs, 3), (x, c) => (c === 1 && trial % 7 === 0 ? 1e39 : x));
      const first = Math.floor(r() * unit);
      const n = Math.min(runs * unit - first, 1 + Math.floor(r() * (runs * unit - first)));
      const values = Float32Array.from(randn(r, n, 1));
      if (trial % 3 === 0) { values[Math.floor(r() * n)] = NaN; values[Math.floor(r() * n)] = -Infinity; values[Math.floor(r() * n)] = 1e-44; }
      for (const write of [true, false]) {
        const buf = simdScratch(n * 4 + 16);
        expect(buf).toBeDefined(); // Node 20 runs WebAssembly SIMD
        const at = 4 * Math.floor(r() * 4); // the block need not start the buffer
        const block = buf!.subarray(at, at + n * 4);
        new Float32Array(block.buffer, block.byteOffset, n).set(values);
        const want = values.slice();
        const got = scaleFloat32Block(block, first, { of, unit }, scale, write);
        const exp = reference(want, first, of, unit, scale, write);
        expect(Object.is(got, exp) || got === exp, `trial ${trial} write ${write}: ${got} vs ${exp}`).toBe(true);
        expect(Buffer.from(block).equals(Buffer.from(want.buffer)), `trial ${trial} write ${write}`).toBe(true);
      }
    }
  });

  it('gives the same on blocks that do not start on a multiple of four bytes (weights where the file put them)', () => {
    const r = rng(53);
    for (let trial = 0; trial < 24; trial++) {
      // some blocks longer than the 1 MiB aligned chunk they are scaled through, so runs cross its edges too
      const unit = [64, 999, 4608, 300001][trial % 4]!, runs = 2 + (trial % 3);
      const of = Int32Array.from({ length: runs }, (_, e) => (e * 5 + 1) % runs);
      const scale = Float64Array.from(randn(r, runs, 3), (x, c) => (c === 0 && trial % 6 === 0 ? 1e39 : x));
      const first = Math.floor(r() * unit);
      const n = Math.min(runs * unit - first, 1 + Math.floor(r() * (runs * unit - first)));
      const values = Float32Array.from(randn(r, n, 1));
      if (trial % 4 === 1) { values[Math.floor(r() * n)] = NaN; values[Math.floor(r() * n)] = Infinity; values[Math.floor(r() * n)] = -1e-44; }
      for (const write of [true, false]) {
        const shift = 1 + (trial % 3);
        const held = new Uint8Array(n * 4 + 8).fill(0xa5);
        const block = held.subarray(shift, shift + n * 4);
        block.set(new Uint8Array(values.buffer));
        const want = values.slice();
        const got = scaleFloat32Block(block, first, { of, unit }, scale, write);
        const exp = reference(want, first, of, unit, scale, write);
        expect(Object.is(got, exp) || got === exp, `trial ${trial} write ${write}: ${got} vs ${exp}`).toBe(true);
        expect(Buffer.from(block).equals(Buffer.from(want.buffer)), `trial ${trial} write ${write}`).toBe(true);
        expect(held.subarray(0, shift).every((x) => x === 0xa5) && held.subarray(shift + n * 4).every((x) => x === 0xa5)).toBe(true);
      }
    }
  });

  it('gives the same on blocks larger than the staging window, runs cut across its edges', () => {
    const r = rng(43);
    for (let trial = 0; trial < 6; trial++) {
      // runs from shorter to much longer than the 32768-element window, starting off any multiple of four
      const unit = [4099, 20001, 40000, 70001, 33333, 65536][trial]!, runs = 3 + (trial % 3);
      const of = Int32Array.from({ length: runs }, (_, e) => (e * 5) % runs);
      const scale = Float64Array.from(randn(r, runs, 3), (x, c) => (c === 2 && trial === 3 ? 1e39 : x));
      const first = Math.floor(r() * unit);
      const n = runs * unit - first - Math.floor(r() * unit);
      const values = Float32Array.from(randn(r, n, 1));
      if (trial % 2 === 0) values[Math.floor(r() * n)] = NaN;
      for (const write of [true, false]) {
        const mine = values.slice(), want = values.slice();
        const got = scaleFloat32Block(new Uint8Array(mine.buffer), first, { of, unit }, scale, write);
        const exp = reference(want, first, of, unit, scale, write);
        expect(Object.is(got, exp) || got === exp, `trial ${trial} write ${write}: ${got} vs ${exp}`).toBe(true);
        expect(Buffer.from(mine.buffer).equals(Buffer.from(want.buffer)), `trial ${trial} write ${write}`).toBe(true);
      }
    }
  });
});
