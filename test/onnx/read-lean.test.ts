// The reader's lean path (names through the name cache, lists at their exact length, a shared empty `extra`)
// must give the same IR as a plain decode, and the same names, op types and shapes as an independent protobuf
// decoder (onnx-proto, built with protobufjs from the ONNX schema), on every demo model, every ONNX backend node
// case in test/fixtures/onnx-conformance, and seeded random graphs whose names are built to collide in the cache.
import { describe, expect, it } from 'vitest';
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, rng } from '../helpers/build.js';
import { decodeGraph, decodeModel } from '../../src/onnx/read.js';
import { fieldsOf, NameCache } from '../../src/onnx/wire.js';
import { serializeModel } from '../../src/onnx/write.js';
import type { Graph } from '../../src/graph/ir.js';

const { onnx } = onnxProto;

const root = join(import.meta.dirname, '..', '..');
const conformance = join(root, 'test', 'fixtures', 'onnx-conformance');

function modelFiles(): string[] {
  const files = readdirSync(join(root, 'models')).filter((f) => f.endsWith('.onnx')).map((f) => join(root, 'models', f));
  for (const d of readdirSync(conformance)) {
    const p = join(conformance, d, 'model.onnx');
    if (existsSync(p)) files.push(p);
  }
  return files;
}

/** The graph field's byte range in a ModelProto (field 7). */
function graphRange(buf: Uint8Array): [number, number] {
  let at: [number, number] = [0, 0];
  for (const f = fieldsOf(buf, 0, buf.byteLength); f.next();) if (f.no === 7) at = [f.vstart, f.vend];
  return at;
}

/** Names, op types and dims as onnx-proto decodes them, graph by graph (subgraphs depth first). */
function shapeOfProto(g: onnxProto.onnx.IGraphProto): unknown[] {
  const out: unknown[] = [];
  const walk = (g: onnxProto.onnx.IGraphProto) => {
    out.push(['graph', g.name ?? '']);
    for (const t of g.initializer ?? []) out.push(['init', t.name ?? '', (t.dims ?? []).map(Number)]);
    for (const n of g.node ?? []) {
      out.push(['node', n.name ?? '', n.opType ?? '', n.domain ?? '', n.input ?? [], n.output ?? [], (n.attribute ?? []).map((a) => a.name ?? '')]);
      for (const a of n.attribute ?? []) {
        if (a.g) walk(a.g);
        for (const sg of a.graphs ?? []) walk(sg);
      }
    }
    for (const v of [...(g.input ?? []), ...(g.output ?? []), ...(g.valueInfo ?? [])]) out.push(['value', v.name ?? '']);
  };
  walk(g);
  return out;
}

function shapeOfIr(g: Graph): unknown[] {
  const out: unknown[] = [];
  const walk = (g: Graph) => {
    out.push(['graph', g.name]);
    for (const t of g.initializers) out.push(['init', t.name, t.dims]);
    for (const n of g.nodes) {
      out.push(['node', n.name, n.opType, n.domain, n.inputs, n.outputs, n.attributes.map((a) => a.name)]);
      for (const a of n.attributes) {
        if (a.value.type === 'GRAPH') walk(a.value.g);
        else if (a.value.type === 'GRAPHS') a.value.graphs.forEach(walk);
      }
    }
    for (const v of [...g.inputs, ...g.outputs, ...g.valueInfo]) out.push(['value', v.name]);
  };
  walk(g);
  return out;
}

/**
 * A plain copy of an IR value for comparison: byte views become their position in the file buffer (comparing
 * the views themselves would compare the whole file buffer once per message), and lists keep their length.
 */
function plainOf(v: unknown): unknown {
  if (v instanceof Uint8Array) return { at: v.byteOffset, length: v.byteLength };
  if (ArrayBuffer.isView(v)) return Array.from(v as unknown as ArrayLike<number | bigint>, String);
  if (Array.isArray(v)) return v.map(plainOf);
  if (v && typeof v === 'object') {
    const out: Record<string, unknown> = {};
    // a tensor read from a file holds `storage` and `origin` on its class (made on first use), not as own fields
    const keys = Object.keys(v);
    for (const k of ['storage', 'origin']) if (k in v && !keys.includes(k) && (v as Record<string, unknown>)[k] !== undefined) keys.push(k);
    for (const k of keys.sort()) out[k] = k === 'origin' ? [(v as { origin: { start: number; end: number } }).origin.start, (v as { origin: { end: number } }).origin.end] : plainOf((v as Record<string, unknown>)[k]);
    return out;
  }
  return v;
}

function checkLean(bytes: Uint8Array): void {
  const lean = decodeModel(bytes, '/x');
  // the plain decode: no name cache is active outside decodeModel
  const [s, e] = graphRange(bytes);
  const plain = decodeGraph(bytes, s, e);
  expect(plainOf(lean.graph)).toEqual(plainOf(plain));
  expect(shapeOfIr(lean.graph)).toEqual(shapeOfProto(onnx.ModelProto.decode(bytes).graph!));
  // and it still writes back byte for byte
  expect(Buffer.from(serializeModel(lean)).equals(Buffer.from(bytes))).toBe(true);
}

describe('lean reader', () => {
  const files = modelFiles();

  it('finds the demo models and the conformance cases', () => {
    expect(files.length).toBeGreaterThan(500);
  });

  it('gives the same IR as a plain decode and the same names as onnx-proto, on every model', () => {
    for (const f of files) {
      try {
        checkLean(new Uint8Array(readFileSync(f)));
      } catch (e) {
        throw new Error(`${f}: ${(e as Error).message}`);
      }
    }
  });

  // Names chosen to stress the cache: many of one length differing in one byte (same slot or not), names that
  // are prefixes of others, non-ASCII names, names longer than the cache's slots hold apart, repeats far apart.
  const alphabet = ['a', 'b', 'Z', '_', '.', '/', '0', '9', 'é', 'ß', '名', '字', '🙂'];
  function randomName(r: () => number): string {
    const len = r() < 0.05 ? 200 + Math.floor(r() * 300) : 1 + Math.floor(r() * 6);
    let s = '';
    for (let i = 0; i < len; i++) s += alphabet[Math.floor(r() * (r() < 0.8 ? 8 : alphabet.length))];
    return s;
  }

  for (const seed of [1, 2, 3, 4, 5, 6, 7, 8]) {
    it(`reads names built to collide in the cache exactly (seed ${seed})`, () => {
      const r = rng(seed);
      const g = new GraphBuilder(randomName(r));
      const values = new Set<string>();
      const fresh = (): string => {
        for (;;) {
          const v = randomName(r);
          if (!values.has(v)) { values.add(v); return v; }
        }
      };
      const x = fresh();
      g.input('x', [1]);
      let last = 'x';
      const ops = ['Relu', 'Identity', 'Neg', 'Abs'];
      const count = 200 + Math.floor(r() * 300);
      const written: string[] = [];
      for (let i = 0; i < count; i++) {
        // read the last value, and sometimes one written long ago (a repeat far from its first spelling)
        const ins = [last];
        const out = fresh();
        const name = r() < 0.5 ? fresh() : '';
        const op = ops[Math.floor(r() * ops.length)]!;
        if (r() < 0.3 && written.length) {
          g.node('Add', [last, written[Math.floor(r() * written.length)]!], {}, { name, outputs: [out] });
        } else {
          g.node(op, ins, {}, { name, outputs: [out] });
        }
        written.push(out);
        last = out;
      }
      void x;
      g.output(last, [1]);
      checkLean(modelBytes(g));
    });
  }

  for (const seed of [1, 2, 3, 4, 5, 6]) {
    it(`gives each initializer its own name whatever order the weights follow (seed ${seed})`, () => {
      // Initializers after the nodes (as exporters write them), in node order, shuffled, or partly so; weights
      // that share a name's prefix or length, omitted inputs ('') and weights read by no node among them.
      const r = rng(100 + seed);
      const g = new GraphBuilder('w');
      g.input('x', [1, 2]);
      let last = 'x';
      const weights: string[] = [];
      const count = 100 + Math.floor(r() * 200);
      for (let i = 0; i < count; i++) {
        const w = r() < 0.5 ? `w${i}` : `${r() < 0.5 ? 'w' : 'wb'}${i}${r() < 0.5 ? '.b' : ''}`;
        weights.push(w);
        const out = `a${i}`;
        const kind = r();
        if (kind < 0.2) g.node('Clip', [last, '', w], {}, { outputs: [out] });
        else if (kind < 0.4) g.node('Identity', [last], {}, { outputs: [out] });
        else g.node('Add', r() < 0.5 ? [last, w] : [w, last], {}, { outputs: [out] });
        last = out;
      }
      g.output(last, [1, 2]);
      const order = weights.map((w, i) => [w, i] as const);
      const mode = seed % 3;
      for (let i = order.length - 1; i > 0; i--) {
        if (mode === 0 || (mode === 2 && r() < 0.2)) {
          const j = Math.floor(r() * (i + 1));
          [order[i], order[j]] = [order[j]!, order[i]!];
        }
      }
      for (const [w] of order) g.init(w, [1, 2], [1, 2]);
      checkLean(modelBytes(g));
    });
  }

  it('the name cache gives back exactly the bytes it is asked for', () => {
    // direct: every range of a buffer of few distinct bytes (many equal-length names, many collisions)
    const r = rng(11);
    const buf = new Uint8Array(4000);
    for (let i = 0; i < buf.length; i++) buf[i] = 0x61 + Math.floor(r() * 3);
    const cache = new NameCache(buf);
    const plain = new TextDecoder();
    for (let k = 0; k < 20000; k++) {
      const s = Math.floor(r() * 3990), e = s + Math.floor(r() * 10);
      expect(cache.name(s, e)).toBe(plain.decode(buf.subarray(s, e)));
    }
  });

  it('decodes names of every length as UTF-8 does: ASCII, multi-byte and invalid sequences (seeded)', () => {
    // short ASCII names are made in JavaScript, the rest by the native decoder: both must give what
    // TextDecoder gives (invalid sequences become U+FFFD)
    const r = rng(12);
    const pools = [[0x30, 0x39, 0x5f, 0x61, 0x7a, 0x2f], [0x61, 0x7f, 0x00, 0x41], [0x61, 0xc3, 0xa9, 0xe2, 0x82, 0xac, 0x80, 0xff]];
    const plain = new TextDecoder();
    for (let k = 0; k < 4000; k++) {
      const pool = pools[k % pools.length]!;
      const len = Math.floor(r() * 20);
      const buf = new Uint8Array(len + 6);
      for (let i = 0; i < buf.length; i++) buf[i] = pool[Math.floor(r() * pool.length)]!;
      const cache = new NameCache(buf);
      expect(cache.name(3, 3 + len)).toBe(plain.decode(buf.subarray(3, 3 + len)));
    }
  });
});
