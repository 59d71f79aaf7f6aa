// emitString writes short ASCII strings straight into the emitter; every string must still come out as the
// protobuf encoding of a length-delimited UTF-8 string (tag, varint length, bytes), as protobufjs writes it.
import { describe, expect, it } from 'vitest';
import protobuf from 'protobufjs';
import { rng } from '../helpers/build.js';
import { Emitter, emitString } from '../../src/onnx/wire.js';

/** protobufjs's own encoding of field `no` holding string `s`. */
function reference(no: number, s: string): Uint8Array {
  return protobuf.Writer.create().uint32((no << 3) | 2).string(s).finish();
}

describe('emitString', () => {
  const pieces = ['a', 'Z', '0', '_', '/', '.', ' ', '\u007f', '\u0000', 'é', 'ß', '名', '🙂'];
  for (const seed of [1, 2, 3, 4]) {
    it(`matches protobufjs on ASCII and other strings of every length near the fast path's limit (seed ${seed})`, () => {
      const r = rng(seed);
      for (let k = 0; k < 400; k++) {
        // lengths around 127/128/129 (the varint's one-byte limit and the fast path's limit), and short ones
        const len = [0, 1, 5, 126, 127, 128, 129, 300][Math.floor(r() * 8)]!;
        const ascii = r() < 0.7;
        let s = '';
        while (s.length < len) s += pieces[Math.floor(r() * (ascii ? 8 : pieces.length))]!;
        s = s.slice(0, len);
        if (/[\ud800-\udbff]$/.test(s)) s = s.slice(0, -1); // a cut emoji: no lone surrogate (not valid text)
        const no = 1 + Math.floor(r() * 20);
        const e = new Emitter();
        e.varint(7); // something before it in the scratch buffer
        emitString(e, no, s);
        const got = e.finish();
        const want = reference(no, s);
        expect(Buffer.from(got.subarray(1)).equals(Buffer.from(want)), JSON.stringify(s)).toBe(true);
        expect(e.length).toBe(1 + want.byteLength);
      }
    });
  }
});
