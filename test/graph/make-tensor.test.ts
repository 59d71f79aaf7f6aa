// makeTensor gives the bytes of small new tensors as views into shared slabs (src/graph/tensor.ts). Each must hold
// exactly what encodeStorage writes for the same values (the general codec, an array of its own), start at a
// multiple of 8, and stay its own: writing one tensor in place, or making thousands more, leaves the others as
// they were. Seeded values, every raw type pleat writes floats into.
import { describe, expect, it } from 'vitest';
import { DataType, type Tensor } from '../../src/graph/ir.js';
import { encodeStorage, makeTensor, tensorToFloat64 } from '../../src/graph/tensor.js';
import { setTensorValues } from '../../src/graph/edit.js';
import { rng } from '../helpers/build.js';

const bytesOf = (t: Tensor) => (t.storage as { bytes: Uint8Array }).bytes;
const TYPES = [DataType.FLOAT, DataType.FLOAT16, DataType.BFLOAT16, DataType.DOUBLE, DataType.INT8, DataType.INT32, DataType.INT64];

describe('makeTensor', () => {
  it('writes what encodeStorage writes, aligned, and each tensor keeps its own bytes', () => {
    const r = rng(5);
    const made: Array<{ t: Tensor; expected: Uint8Array }> = [];
    for (let k = 0; k < 20000; k++) {
      const dataType = TYPES[k % TYPES.length]!;
      // sizes around the slab's limit for views (4096 bytes) and small ones
      const n = [0, 1, 3, 4, 17, 64, 511, 513, 1100][Math.floor(r() * 9)]!;
      const values = Float64Array.from({ length: n }, () => (dataType === DataType.INT8 ? Math.round(r() * 200 - 100) : (r() - 0.5) * 50));
      const t = makeTensor(`t${k}`, [n], dataType, values);
      const expected = (encodeStorage(values, dataType, { kind: 'raw', bytes: new Uint8Array(0) }) as { bytes: Uint8Array }).bytes.slice();
      expect(bytesOf(t).byteOffset % 8).toBe(0);
      made.push({ t, expected });
    }
    // one tensor of each size class rewritten in place: its neighbours in the slab must not change
    const changed = new Set<number>();
    for (let k = 0; k < made.length; k += 1013) {
      const { t } = made[k]!;
      const n = t.dims[0]!;
      const values = Float64Array.from({ length: n }, (_, i) => i + 1);
      setTensorValues(t, values, { inPlace: true });
      made[k]!.expected = (encodeStorage(values, t.dataType, { kind: 'raw', bytes: new Uint8Array(0) }) as { bytes: Uint8Array }).bytes.slice();
      changed.add(k);
    }
    for (const [k, { t, expected }] of made.entries()) {
      expect(Buffer.from(bytesOf(t)).equals(Buffer.from(expected)), `tensor ${k}${changed.has(k) ? ' (rewritten)' : ''}`).toBe(true);
    }
    // and the values read back (a float32 sample: exact in float64)
    const f = made.find((m) => m.t.dataType === DataType.FLOAT && m.t.dims[0] === 17)!;
    expect(Array.from(tensorToFloat64(f.t))).toEqual(Array.from(new Float32Array(f.expected.buffer, f.expected.byteOffset, 17)));
  });
});
