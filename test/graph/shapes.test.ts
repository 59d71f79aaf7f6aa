// Shapes propagated from the inputs (src/graph/shapes.ts) against the shapes onnxruntime-node produces for the
// same graph (graph optimizations off): every intermediate value is made a model output, so the runtime reports
// its shape. Seeded random sizes, several draws.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { inferShapes } from '../../src/graph/shapes.js';
import { runOrt } from '../helpers/ort.js';
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';

const dir = mkdtempSync(join(tmpdir(), 'pleat-shapes-'));

function build(seed: number): { g: GraphBuilder; x: number[]; values: string[] } {
  const r = rng(seed);
  const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
  const n = pick(1, 2), c = pick(2, 4), h = pick(5, 9), w = pick(5, 9), co = pick(2, 5);
  const g = new GraphBuilder();
  g.input('x', [n, c, h, w]);
  const values: string[] = [];
  const v = (name: string) => { values.push(name); return name; };
  const k = pick(1, 3), s = pick(1, 2);
  const conv = v(g.node('Conv', ['x', g.init('cw', [co, c, k, k], randn(r, co * c * k * k))], { strides: [s, s], pads: [1, 0, 1, 0] }, { name: 'conv' }));
  const pool = v(g.node('MaxPool', [conv], { kernel_shape: [2, 2], ceil_mode: pick(0, 1) }, { name: 'pool' }));
  const red = v(g.node('ReduceMean', [pool], { axes: [-1], keepdims: pick(0, 1) }, { name: 'rm' }));
  const tr = v(g.node('Transpose', [pool], { perm: [0, 2, 3, 1] }, { name: 'tr' }));
  const flat = v(g.node('Flatten', [tr], { axis: 2 }, { name: 'flat' }));
  const rs = v(g.node('Reshape', [tr, g.init('shape', [3], [0, -1, co], 7)], {}, { name: 'rs' }));
  const mm = v(g.node('MatMul', [rs, g.init('mw', [co, 3], randn(r, co * 3))], {}, { name: 'mm' }));
  const un = v(g.node('Unsqueeze', [mm, g.init('ax', [1], [1], 7)], {}, { name: 'un' }));
  const sq = v(g.node('Squeeze', [un, g.init('ax2', [1], [1], 7)], {}, { name: 'sq' }));
  const cat = v(g.node('Concat', [sq, mm], { axis: -1 }, { name: 'cat' }));
  const gap = v(g.node('GlobalAveragePool', [conv], {}, { name: 'gap' }));
  const fl = v(g.node('Flatten', [gap], {}, { name: 'fl' }));
  const gm = v(g.node('Gemm', [fl, g.init('gw', [3, co], randn(r, 3 * co))], { transB: 1 }, { name: 'gemm' }));
  const add = v(g.node('Add', [gm, g.init('gb', [1, 3], randn(r, 3))], {}, { name: 'add' }));
  const up = v(g.node('ConvTranspose', [conv, g.init('tw', [co, 2, 3, 3], randn(r, co * 18))], { strides: [2, 2], pads: [1, 1, 1, 1], output_padding: [1, 1] }, { name: 'up' }));
  const pad = v(g.node('Pad', [up, g.init('pads', [8], [0, 0, 1, 2, 0, 0, 2, 1], 7)], {}, { name: 'pad' }));
  void red; void flat; void cat; void add; void pad;
  for (const name of values) g.output(name);
  return { g, x: [n, c, h, w], values };
}

describe('inferShapes', () => {
  for (const seed of [1, 2, 3, 4]) {
    it(`agrees with onnxruntime-node on every value (seed ${seed})`, async () => {
      const { g, x, values } = build(seed);
      const bytes = modelBytes(g, { opset: 13 });
      const model = parseModel(bytes, dir);
      const inferred = inferShapes(model.graph);
      const got = await runOrt(bytes, { x: { dims: x, data: Float32Array.from(randn(rng(seed), x.reduce((a, b) => a * b, 1))) } });
      for (const name of values) expect(inferred.get(name), name).toEqual(got[name]!.dims);
    });
  }

  it('a graph edited in place after it was read gets the shapes of the graph as edited (validation\'s kept name ids are not taken)', () => {
    for (const seed of [1, 2, 3, 4]) {
      const { g, values } = build(seed);
      const graph = parseModel(modelBytes(g, { opset: 13 }), dir).graph;
      const asRead = inferShapes(graph);
      // rename the Conv's output in place, in the node and in every reader (same node objects, same arrays)
      for (const n of graph.nodes) {
        n.outputs.forEach((o, k) => { if (o === 'conv') n.outputs[k] = 'conv_renamed'; });
        n.inputs.forEach((v, k) => { if (v === 'conv') n.inputs[k] = 'conv_renamed'; });
      }
      const edited = inferShapes(graph);
      expect(edited.get('conv_renamed'), `seed ${seed}`).toEqual(asRead.get('conv'));
      expect(edited.get('conv')).toBeUndefined();
      for (const name of values.filter((v) => v !== 'conv')) expect(edited.get(name), `seed ${seed}: ${name}`).toEqual(asRead.get(name));
    }
  });

  it('a graph whose nodes are listed out of order gets the same shapes as the sorted graph (one pass in list order only when sorted)', () => {
    for (const seed of [1, 2, 3, 4, 5, 6]) {
      const { g, values } = build(seed);
      const graph = parseModel(modelBytes(g, { opset: 13 }), dir).graph;
      const sorted = inferShapes(graph);
      const r = rng(seed + 50);
      const shuffled = { ...graph, nodes: [...graph.nodes] };
      for (let i = shuffled.nodes.length - 1; i > 0; i--) {
        const j = Math.floor(r() * (i + 1));
        [shuffled.nodes[i], shuffled.nodes[j]] = [shuffled.nodes[j]!, shuffled.nodes[i]!];
      }
      const got = inferShapes(shuffled);
      for (const name of values) expect(got.get(name), `seed ${seed}: ${name}`).toEqual(sorted.get(name));
    }
  });

  it('pooling with ceil_mode=1, explicit pads or auto_pad=VALID: a window that would start past the input is not counted (onnxruntime-node dims)', async () => {
    for (let seed = 1; seed <= 24; seed++) {
      const r = rng(seed + 70);
      const pick = (lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));
      const k = pick(1, 3), s = pick(2, 4), len = k + pick(0, 8), p0 = pick(0, k - 1), p1 = pick(0, k - 1);
      const attrs = seed % 2 ? { kernel_shape: [k], strides: [s], auto_pad: 'VALID', ceil_mode: 1 } : { kernel_shape: [k], strides: [s], pads: [p0, p1], ceil_mode: 1 };
      const g = new GraphBuilder();
      g.input('x', [1, 2, len]).output('y');
      g.node(seed % 4 < 2 ? 'MaxPool' : 'AveragePool', ['x'], attrs, { name: 'pool', outputs: ['y'] });
      const bytes = modelBytes(g, { opset: 12 });
      const got = await runOrt(bytes, { x: { dims: [1, 2, len], data: Float32Array.from(randn(r, 2 * len)) } });
      expect(inferShapes(parseModel(bytes, dir).graph).get('y'), `seed ${seed} len ${len} ${JSON.stringify(attrs)}`).toEqual(got.y!.dims);
    }
  });

  it('leaves a shape unknown when it depends on values computed at run time, and marks symbolic dims -1', () => {
    const g = new GraphBuilder();
    g.input('x', ['batch', 4, 6]).input('target', [2], 7).output('y').output('z');
    g.node('Reshape', ['x', 'target'], {}, { name: 'rs', outputs: ['y'] });
    g.node('Transpose', ['x'], { perm: [2, 0, 1] }, { name: 'tr', outputs: ['z'] });
    const shapes = inferShapes(parseModel(modelBytes(g), dir).graph);
    expect(shapes.get('y')).toBeUndefined();
    expect(shapes.get('not-in-the-graph')).toBeUndefined();
    expect(shapes.get(undefined as unknown as string)).toBeUndefined(); // a missing input asked for: no shape
    expect(shapes.get('z')).toEqual([6, -1, 4]);
    // a given shape replaces the declared one
    expect(inferShapes(parseModel(modelBytes(g), dir).graph, new Map([['x', [3, 4, 6]]])).get('z')).toEqual([6, 3, 4]);
  });
});
