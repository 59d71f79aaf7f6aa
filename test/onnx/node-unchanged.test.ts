// nodeUnchanged (src/onnx/signature.ts) compares a node with its original bytes field by field, without decoding
// the node again. It must answer exactly as comparing with a fresh decodeNode of those bytes does (the way it
// worked before): for node bytes with names written twice (the last one counts), non-ASCII and invalid UTF-8
// names, unknown fields and attributes, each field in any order, and every kind of change made without touch().
// Seeded.
import { describe, expect, it } from 'vitest';
import { Emitter, WT_LEN, WT_VARINT, emitString } from '../../src/onnx/wire.js';
import { decodeNode, type KidRanges } from '../../src/onnx/read.js';
import { nodeUnchanged, type Kid } from '../../src/onnx/signature.js';
import type { Node } from '../../src/graph/ir.js';
import { rng } from '../helpers/build.js';
import { bytesOf } from '../helpers/emitted.js';

/** The comparison as it was: decode the original bytes again and compare field by field. */
function byDecoding(n: Node, attrs: readonly Kid[]): boolean {
  const o = n.origin;
  if (!o) return false;
  const ranges: KidRanges = [];
  const was = decodeNode(o.buf, o.start, o.end, 0, ranges);
  const same = (a: readonly string[], b: readonly string[]) => a.length === b.length && a.every((x, i) => x === b[i]);
  const sameExtra = n.extra.length === was.extra.length && n.extra.every((x, i) => x.field === was.extra[i]!.field &&
    x.bytes.buffer === was.extra[i]!.bytes.buffer && x.bytes.byteOffset === was.extra[i]!.bytes.byteOffset && x.bytes.byteLength === was.extra[i]!.bytes.byteLength);
  let k = 0, kidsSame = true;
  for (let i = 0; i < ranges.length; i += 3) {
    if (ranges[i] !== 5) continue;
    const kid = attrs[k++];
    if (!kid || kid.buffer !== o.buf.buffer || kid.byteOffset !== o.buf.byteOffset + ranges[i + 1]! || kid.byteLength !== ranges[i + 2]! - ranges[i + 1]!) kidsSame = false;
  }
  return n.name === was.name && n.opType === was.opType && n.domain === was.domain && n.docString === was.docString &&
    same(n.inputs, was.inputs) && same(n.outputs, was.outputs) && sameExtra && kidsSame && k === attrs.length;
}

const NAMES = ['x', 'conv_3', 'c17', 'y17', 'café', '名前', 'a\u{1F600}b', '', 'Relu', 'ai.onnx'];

/** A node message with its fields in a random order: some singular fields twice, unknown fields, attributes. */
function nodeBytes(r: () => number): { buf: Uint8Array; attrs: Array<[number, number]> } {
  const e = new Emitter();
  const pick = () => NAMES[Math.floor(r() * NAMES.length)]!;
  const fields: Array<(e: Emitter) => void> = [];
  const ins = Math.floor(r() * 4), outs = 1 + Math.floor(r() * 2);
  for (let i = 0; i < ins; i++) fields.push((e) => emitString(e, 1, pick()));
  for (let i = 0; i < outs; i++) fields.push((e) => emitString(e, 2, pick()));
  for (const no of [3, 4, 6, 7]) {
    const times = Math.floor(r() * 3); // absent, once, or twice (the last one counts)
    for (let i = 0; i < times; i++) fields.push((e) => emitString(e, no, pick()));
  }
  if (r() < 0.3) fields.push((e) => { e.tag(3, WT_LEN); e.varint(2); e.bytes(Uint8Array.of(0xc3, 0x28)); }); // invalid UTF-8
  if (r() < 0.5) fields.push((e) => { e.tag(9, WT_VARINT); e.varint(Math.floor(r() * 1000)); });
  if (r() < 0.3) fields.push((e) => emitString(e, 11, 'kept as it was'));
  const attrCount = Math.floor(r() * 3);
  for (let i = 0; i < attrCount; i++) {
    fields.push((e) => {
      const a = new Emitter();
      emitString(a, 1, `attr${i}`);
      a.tag(3, WT_VARINT); a.varint(i + 1);
      a.tag(20, WT_VARINT); a.varint(2);
      const b = bytesOf(a);
      e.tag(5, WT_LEN); e.varint(b.length); e.bytes(b);
    });
  }
  for (let i = fields.length - 1; i > 0; i--) { const j = Math.floor(r() * (i + 1)); [fields[i], fields[j]] = [fields[j]!, fields[i]!]; }
  for (const f of fields) f(e);
  // a few bytes before the node, so the message does not start at 0
  const body = bytesOf(e);
  const buf = new Uint8Array(body.length + 3);
  buf.set(body, 3);
  const ranges: KidRanges = [];
  decodeNode(buf, 3, buf.length, 0, ranges);
  const attrs: Array<[number, number]> = [];
  for (let i = 0; i < ranges.length; i += 3) if (ranges[i] === 5) attrs.push([ranges[i + 1]!, ranges[i + 2]!]);
  return { buf, attrs };
}

// Each changes a node read from bytes without touch(), as code that forgets it would.
const changes: Array<(n: Node, r: () => number) => void> = [
  (n) => { n.name = `${n.name}x`; },
  (n) => { n.name = ''; },
  (n) => { n.opType = n.opType === 'Relu' ? 'Abs' : 'Relu'; },
  (n) => { n.domain = n.domain ? '' : 'ai.onnx'; },
  (n) => { n.docString = `${n.docString}.`; },
  (n) => { n.inputs = [...n.inputs, 'added']; },
  (n) => { if (n.inputs.length) n.inputs = n.inputs.slice(1); },
  (n) => { n.inputs = n.inputs.map((v) => (v === '' ? 'x' : `${v.slice(0, -1)}${v.endsWith('z') ? 'y' : 'z'}`)); },
  (n) => { n.outputs = [...n.outputs].reverse(); },
  (n) => { n.outputs = n.outputs.map((v) => `${v}`.normalize('NFD')); },
  (n) => { n.extra = []; },
  (n) => { n.extra = [...n.extra, { field: 12, bytes: Uint8Array.of(0x60, 0) }]; },
  (n) => { if (n.extra.length) n.extra = [{ ...n.extra[0]!, bytes: n.extra[0]!.bytes.slice() }, ...n.extra.slice(1)]; },
];

describe('nodeUnchanged', () => {
  it('answers as a comparison with the decoded original bytes does (seeded)', () => {
    const r = rng(41);
    let unchanged = 0, changed = 0;
    for (let round = 0; round < 600; round++) {
      const { buf, attrs } = nodeBytes(r);
      const n = decodeNode(buf, 3, buf.length, 0, []);
      let kids: Kid[] = attrs.map(([s, e]) => buf.subarray(s, e));
      if (r() < 0.6) {
        const k = Math.floor(r() * (changes.length + 3));
        if (k < changes.length) changes[k]!(n, r);
        else if (k === changes.length) kids = kids.map((kid, i) => (i === 0 ? undefined : kid)); // an attribute re-encoded
        else if (k === changes.length + 1) kids = [...kids, buf.subarray(0, 2)]; // one attribute more
        else kids = kids.map((kid) => kid && kid.slice()); // equal bytes elsewhere: not the original
      }
      const want = byDecoding(n, kids);
      expect(nodeUnchanged(n, kids), `round ${round}`).toBe(want);
      if (want) unchanged++; else changed++;
    }
    // both answers were met often enough for the comparison to mean something
    expect(unchanged).toBeGreaterThan(150);
    expect(changed).toBeGreaterThan(150);
  });

  it('a node with no original bytes is changed', () => {
    const n: Node = { name: 'n', opType: 'Relu', domain: '', inputs: ['x'], outputs: ['y'], attributes: [], docString: '', extra: [] };
    expect(nodeUnchanged(n, [])).toBe(false);
  });
});
