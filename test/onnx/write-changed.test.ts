// Changed tensors and nodes (no original bytes, no unknown fields: what a fold leaves by the tens of thousands)
// are written by a direct path in src/onnx/write.ts. Each must come out exactly as protobuf encodes the message
// with its fields in field-number order (the order the writer gives a message with no original field order),
// checked against protobufjs's own Writer, and read back to the same content. Seeded: names ASCII and not,
// short and longer than 128 characters, dims needing multi-byte varints, raw data on both sides of the size the
// writer copies (256 bytes), doc strings set or not.
import { describe, expect, it } from 'vitest';
import protobuf from 'protobufjs';
import { GraphBuilder, modelBytes, rng } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { touch } from '../../src/graph/edit.js';
import type { Node, Tensor } from '../../src/graph/ir.js';

function sample(): Uint8Array {
  const g = new GraphBuilder('main');
  g.input('x', [1, 4, 3, 3]).output('y', [1, 4, 3, 3]);
  g.init('w', [4, 4, 1, 1], Array.from({ length: 16 }, (_, i) => i / 7));
  g.init('b', [4], [1, 2, 3, 4]);
  g.node('Conv', ['x', 'w', 'b'], { kernel_shape: [1, 1], group: 1 }, { name: 'conv', outputs: ['c'] });
  g.node('Relu', ['c'], {}, { name: 'relu', outputs: ['y'] });
  return modelBytes(g);
}

/** protobufjs's encoding of a tensor with raw data, fields in number order. */
function tensorRef(t: Tensor, raw: Uint8Array): Uint8Array {
  const w = protobuf.Writer.create();
  for (const d of t.dims) w.uint32(1 << 3).int64(d);
  w.uint32(2 << 3).int32(t.dataType);
  if (t.name) w.uint32((8 << 3) | 2).string(t.name);
  w.uint32((9 << 3) | 2).bytes(raw);
  if (t.docString) w.uint32((12 << 3) | 2).string(t.docString);
  return w.finish();
}

/** protobufjs's encoding of a node whose attributes are unchanged (written as their original bytes). */
function nodeRef(n: Node): Uint8Array {
  const w = protobuf.Writer.create();
  for (const s of n.inputs) w.uint32((1 << 3) | 2).string(s);
  for (const s of n.outputs) w.uint32((2 << 3) | 2).string(s);
  if (n.name) w.uint32((3 << 3) | 2).string(n.name);
  w.uint32((4 << 3) | 2).string(n.opType);
  for (const a of n.attributes) w.uint32((5 << 3) | 2).bytes(a.origin!.buf.subarray(a.origin!.start, a.origin!.end));
  if (n.docString) w.uint32((6 << 3) | 2).string(n.docString);
  if (n.domain) w.uint32((7 << 3) | 2).string(n.domain);
  return w.finish();
}

const pieces = ['a', 'Z', '0', '_', '.', '/', 'é', '名', '🙂'];
function text(r: () => number): string {
  const len = [0, 1, 9, 127, 128, 129, 200][Math.floor(r() * 7)]!;
  const ascii = r() < 0.6;
  let s = '';
  while (s.length < len) s += pieces[Math.floor(r() * (ascii ? 6 : pieces.length))]!;
  return s;
}

function contains(hay: Uint8Array, needle: Uint8Array): boolean {
  return Buffer.from(hay.buffer, hay.byteOffset, hay.byteLength).indexOf(Buffer.from(needle.buffer, needle.byteOffset, needle.byteLength)) >= 0;
}

describe('writing changed tensors and nodes', () => {
  for (const seed of [1, 2, 3, 4, 5, 6]) {
    it(`matches protobufjs's encoding and reads back the same (seed ${seed})`, () => {
      const r = rng(seed);
      const bytes = sample();
      const m = parseModel(bytes, '/tmp');
      const conv = m.graph.nodes.find((n) => n.name === 'conv')!;
      // new tensors and a changed one
      const made: Array<{ t: Tensor; raw: Uint8Array }> = [];
      for (let k = 0; k < 12; k++) {
        // one-byte elements (uint8, int8), so any size is a whole tensor; an empty one with dims of several varint bytes
        const empty = r() < 0.2;
        const size = empty ? 0 : [1, 4, 64, 127, 128, 255, 256, 257, 600][Math.floor(r() * 9)]!;
        const raw = Uint8Array.from({ length: size }, () => Math.floor(r() * 256));
        const dims = empty ? [0, [1, 127, 128, 300, 70000][Math.floor(r() * 5)]!] : r() < 0.5 ? [size] : [1, size];
        const t: Tensor = { name: `${text(r)}#${k}`, dims, dataType: r() < 0.5 ? 2 : 3, storage: { kind: 'raw', bytes: raw }, docString: r() < 0.3 ? text(r) : '', extra: [] };
        made.push({ t, raw });
        m.graph.initializers.push(t);
      }
      const w = m.graph.initializers.find((t) => t.name === 'w')!;
      const scaled = Uint8Array.from({ length: 64 }, (_, i) => (i * 37) & 255);
      w.storage = { kind: 'raw', bytes: scaled };
      touch(w);
      touch(m.graph);
      // (rewired to one of the new tensors: reading back validates that it is defined)
      conv.inputs = ['x', 'w', r() < 0.3 ? 'b' : made[Math.floor(r() * 12)]!.t.name];
      conv.name = r() < 0.3 ? '' : text(r);
      conv.docString = r() < 0.5 ? text(r) : '';
      touch(conv);
      made.push({ t: w, raw: scaled });

      const out = serializeModel(m);
      for (const { t, raw } of made) expect(contains(out, tensorRef(t, raw)), `tensor ${JSON.stringify(t.name)}`).toBe(true);
      expect(contains(out, nodeRef(conv)), 'node').toBe(true);

      const back = parseModel(out, '/tmp');
      const c2 = back.graph.nodes[0]!;
      expect([c2.name, c2.inputs, c2.outputs, c2.docString, c2.attributes.length]).toEqual([conv.name, conv.inputs, conv.outputs, conv.docString, conv.attributes.length]);
      for (const { t, raw } of made) {
        const u = back.graph.initializers.find((x) => x.name === t.name)!;
        expect([u.dims, u.dataType, u.docString]).toEqual([t.dims, t.dataType, t.docString]);
        expect(Buffer.from((u.storage as { bytes: Uint8Array }).bytes).equals(Buffer.from(raw))).toBe(true);
      }
    });
  }
});

// The direct path writes these messages into shared slabs of 64 KB (src/onnx/write.ts): thousands of them span
// several slabs, and a second serialization must not write over the bytes the first one handed out.
describe('changed messages in shared slabs', () => {
  it('keeps every message intact across slabs and across serializations', () => {
    const r = rng(11);
    const m = parseModel(sample(), '/tmp');
    const made: Array<{ t: Tensor; raw: Uint8Array }> = [];
    for (let k = 0; k < 3000; k++) {
      const size = [16, 64, 100, 250][k % 4]!;
      const raw = Uint8Array.from({ length: size }, () => Math.floor(r() * 256));
      const t: Tensor = { name: `t${k}`, dims: [size], dataType: 2, storage: { kind: 'raw', bytes: raw }, docString: k % 7 === 0 ? `doc ${k}` : '', extra: [] };
      made.push({ t, raw });
      m.graph.initializers.push(t);
    }
    touch(m.graph);
    const first = serializeModel(m);
    const firstCopy = first.slice();
    const second = serializeModel(m);
    expect(Buffer.from(second).equals(Buffer.from(firstCopy))).toBe(true);
    expect(Buffer.from(first).equals(Buffer.from(firstCopy))).toBe(true);
    // each message exactly as protobufjs encodes it (checked on a sample: the search is linear in the file)
    for (const { t, raw } of made.filter((_, i) => i % 97 === 0)) expect(contains(second, tensorRef(t, raw)), t.name).toBe(true);
    const back = parseModel(second, '/tmp');
    for (const { t, raw } of made) {
      const u = back.graph.initializers.find((x) => x.name === t.name)!;
      expect(Buffer.from((u.storage as { bytes: Uint8Array }).bytes).equals(Buffer.from(raw)), t.name).toBe(true);
    }
  });
});
