// The wire reader's numbers and strings: varints of every size (int64 negatives as protobuf encodes them, ten
// bytes), packed and unpacked repeated fields, and UTF-8 names, read back from what the emitter writes. Seeded.
import { describe, expect, it } from 'vitest';
import { Emitter, WT_LEN, emitInt, emitString, fieldsOf, readInt, readPackedVarints, readString } from '../../src/onnx/wire.js';
import { rng } from '../helpers/build.js';
import { bytesOf } from '../helpers/emitted.js';

describe('wire reader', () => {
  it('reads back every varint the emitter writes (seeded, with negatives and 2^53 - 1)', () => {
    const r = rng(5);
    const values = [0, 1, 127, 128, 300, -1, -2, -128, 2 ** 31 - 1, -(2 ** 31), 2 ** 32, 2 ** 53 - 1, -(2 ** 53 - 1)];
    for (let i = 0; i < 500; i++) {
      const bits = Math.floor(r() * 53);
      const v = Math.floor(r() * 2 ** bits);
      values.push(r() < 0.3 && v !== 0 ? -v : v);
    }
    const e = new Emitter();
    for (const v of values) emitInt(e, 3, v);
    // the same values packed into one field
    const packed = new Emitter();
    for (const v of values) packed.varint(v);
    const p = bytesOf(packed);
    e.tag(4, WT_LEN); e.varint(p.length); e.bytes(p);
    const buf = bytesOf(e);
    const single: number[] = [], fromPacked: number[] = [];
    for (const f = fieldsOf(buf, 0, buf.length); f.next();) {
      if (f.no === 3) single.push(readInt(buf, f));
      else readPackedVarints(buf, f, fromPacked);
    }
    expect(single).toEqual(values);
    expect(fromPacked).toEqual(values);
  });

  it('reads UTF-8 names, ASCII or not, at any offset', () => {
    const names = ['', 'x', 'conv_1/BatchNorm:0', 'Größe', '重み', 'emoji 🙂 end', 'a'.repeat(300)];
    const e = new Emitter();
    emitInt(e, 1, 7); // an odd offset before the strings
    for (const n of names) emitString(e, 2, n);
    const buf = bytesOf(e);
    const got: string[] = [];
    for (const f = fieldsOf(buf, 0, buf.length); f.next();) if (f.no === 2) got.push(readString(buf, f));
    expect(got).toEqual(names);
  });
});
