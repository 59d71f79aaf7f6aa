// A norm's parameter vectors read into reused scratch arrays (src/fold/scratch-vectors.ts) must be the numbers
// tensorToFloat64 gives, whatever the storage form, byte offset or length, and a slot must not disturb another.
// Seeded: raw float32 at every offset modulo 4 (as raw_data sits in a file), float_data, double and float16.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { DataType, rawBytesOf, type Tensor } from '../../src/graph/ir.js';
import { makeTensor, tensorToFloat64 } from '../../src/graph/tensor.js';
import { readModelFile } from '../../src/onnx/read.js';
import { isOnDisk, readWholeUpTo } from '../../src/onnx/sparse-read.js';
import { vectorInSlot } from '../../src/fold/scratch-vectors.js';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';

/** Raw float32 bytes at `offset` into a larger buffer, as a tensor read from a file holds them. */
function rawAt(name: string, values: Float32Array, offset: number): Tensor {
  const buf = new Uint8Array(offset + values.byteLength + 3);
  buf.set(new Uint8Array(values.buffer, values.byteOffset, values.byteLength), offset);
  return { name, dims: [values.length], dataType: DataType.FLOAT, storage: { kind: 'raw', bytes: buf.subarray(offset, offset + values.byteLength) }, docString: '', extra: [] };
}

const same = (a: Float64Array, b: Float64Array) => a.length === b.length && a.every((x, i) => Object.is(x, b[i]));

// The model here is small; it is read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('scratch parameter vectors', () => {
  it('hold the values tensorToFloat64 gives, for every storage form, offset and length', () => {
    const r = rng(31);
    for (let k = 0; k < 200; k++) {
      const n = 1 + Math.floor(r() * 300);
      const v = Float32Array.from(randn(r, n, 3));
      if (k % 7 === 0) { v[0] = NaN; v[n - 1] = -0; }
      const form = k % 4;
      const t = form === 0 ? rawAt(`t${k}`, v, Math.floor(r() * 8))
        : form === 1 ? { name: `t${k}`, dims: [n], dataType: DataType.FLOAT, storage: { kind: 'float_data' as const, values: v }, docString: '', extra: [] }
          : makeTensor(`t${k}`, [n], form === 2 ? DataType.DOUBLE : DataType.FLOAT16, v);
      const slot = k % 4;
      expect(same(vectorInSlot(t, slot), tensorToFloat64(t))).toBe(true);
    }
  });

  it('keep each slot to itself, and follow a change of length', () => {
    const a = rawAt('a', Float32Array.from([1, 2, 3]), 1), b = rawAt('b', Float32Array.from([4, 5, 6, 7, 8]), 2);
    const va = vectorInSlot(a, 0);
    const vb = vectorInSlot(b, 1);
    expect([...va]).toEqual([1, 2, 3]);
    expect([...vb]).toEqual([4, 5, 6, 7, 8]);
    expect([...vectorInSlot(b, 0)]).toEqual([4, 5, 6, 7, 8]); // slot 0 now holds five values
    expect([...vb]).toEqual([4, 5, 6, 7, 8]);
  });

  it('read a long vector still on disk (a model file read sparsely) as the decoder does, and leave it on disk', () => {
    const n = 1 << 20; // 4 MiB of float32: a read leaves most of it on disk
    const g = new GraphBuilder();
    g.input('x', [1, n]).output('y');
    g.init('s', [n], randn(rng(3), n, 1));
    g.node('Mul', ['x', 's'], {}, { outputs: ['y'] });
    const file = join(mkdtempSync(join(tmpdir(), 'pleat-scratch-')), 'long.onnx');
    writeFileSync(file, modelBytes(g));
    const t = readModelFile(file).graph.initializers[0]!;
    expect(isOnDisk(rawBytesOf(t)!)).toBe(true);
    expect(same(vectorInSlot(t, 2), tensorToFloat64(t))).toBe(true);
    expect(isOnDisk(rawBytesOf(t)!)).toBe(true);
  });

  it('refuse a tensor whose data is shorter than its dims, as tensorToFloat64 does', () => {
    const t = rawAt('short', Float32Array.from([1, 2]), 0);
    t.dims = [3];
    expect(() => vectorInSlot(t, 0)).toThrow(/holds 2 elements but its dims \[3\] need 3/);
  });
});
