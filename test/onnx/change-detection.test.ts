// The writer decides at write time, from each message's original bytes, whether the message changed
// (src/onnx/signature.ts). A change made without touch() must still reach the output, for every kind of change
// the earlier read-time signatures caught (fields, lists, order, replaced children, nested subgraphs), while a
// model with no change stays byte-identical. Seeded: each round applies a random subset of the changes.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, T, f, fs, rng } from '../helpers/build.js';
import { decodeModel, parseModel } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import type { Attribute, Graph, Model, Tensor } from '../../src/graph/ir.js';

function sample(): Uint8Array {
  const then = new GraphBuilder('then');
  then.output('t_out', [1, 2]);
  then.node('Neg', ['x'], {}, { name: 'neg', outputs: ['t_out'] });
  const other = new GraphBuilder('else');
  other.output('e_out', [1, 2]);
  other.node('Abs', ['x'], {}, { name: 'abs', outputs: ['e_out'] });
  const g = new GraphBuilder('main');
  g.input('x', [1, 2]).input('c', [], T.BOOL).output('y', [1, 2]).info('m', [1, 2]);
  g.init('s', [2], [2, 3]);
  g.init('typed', [2], [5, 6], T.FLOAT, 'typed');
  g.init('k', [2], [7, 8]);
  g.node('Mul', ['x', 's'], {}, { name: 'mul', outputs: ['m'] });
  g.node('LeakyRelu', ['m'], { alpha: f(0.5) }, { name: 'leaky', outputs: ['l'] });
  g.node('If', ['c'], { then_branch: then, else_branch: other }, { name: 'if', outputs: ['i'] });
  g.node('ReduceSum', ['l'], { keepdims: 1, axes: [1], scales: fs([1, 2]), mode: 'plain' }, { name: 'rs', outputs: ['r'] });
  g.node('Add', ['r', 'k'], {}, { name: 'add', outputs: ['y'] });
  return modelBytes(g);
}

/** Everything the writer must carry, as plain data (tensor values decoded). */
function project(m: Model): unknown {
  const tensor = (t: Tensor) => ({ name: t.name, dims: t.dims, dataType: t.dataType, docString: t.docString, values: Array.from(tensorToFloat64(t)) });
  const attribute = (a: Attribute): unknown => {
    const v = a.value;
    const value = v.type === 'TENSOR' ? tensor(v.t) : v.type === 'GRAPH' ? graph(v.g)
      : v.type === 'STRING' ? Buffer.from(v.s).toString() : v.type === 'FLOATS' ? v.floats : v.type === 'INTS' ? v.ints
      : v.type === 'FLOAT' ? v.f : v.type === 'INT' ? v.i : v.type;
    return { name: a.name, type: v.type, value, docString: a.docString };
  };
  const graph = (g: Graph): unknown => ({
    name: g.name, docString: g.docString,
    nodes: g.nodes.map((n) => ({ name: n.name, opType: n.opType, domain: n.domain, inputs: n.inputs, outputs: n.outputs, docString: n.docString, attributes: n.attributes.map(attribute) })),
    initializers: g.initializers.map(tensor),
    values: [g.inputs, g.outputs, g.valueInfo].map((l) => l.map((v) => ({ name: v.name, elemType: v.elemType, shape: v.shape, docString: v.docString }))),
  });
  return { ir: m.irVersion, producer: [m.producerName, m.producerVersion], opsets: m.opsets.map((o) => [o.domain, o.version]), metadata: m.metadata, docString: m.docString, graph: graph(m.graph) };
}

const node = (m: Model, name: string) => m.graph.nodes.find((n) => n.name === name)!;
const init = (m: Model, name: string) => m.graph.initializers.find((t) => t.name === name)!;
const attribute = (m: Model, nodeName: string, name: string) => node(m, nodeName).attributes.find((a) => a.name === name)!;

// Each edits the model in place and never calls touch().
const changes: Record<string, (m: Model) => void> = {
  'node name': (m) => { node(m, 'mul').name = 'times'; },
  'node input': (m) => { node(m, 'add').inputs[1] = 's'; },
  'node output list': (m) => { node(m, 'rs').outputs.push('extra'); },
  'node op type': (m) => { node(m, 'add').opType = 'Sub'; },
  'node doc string': (m) => { node(m, 'leaky').docString = 'note'; },
  'node order': (m) => { const n = m.graph.nodes; [n[0], n[1]] = [n[1]!, n[0]!]; },
  'node removed': (m) => { m.graph.nodes.splice(m.graph.nodes.indexOf(node(m, 'if')), 1); },
  'node added (copy of one read)': (m) => { m.graph.nodes.push({ ...node(m, 'add'), outputs: ['y2'] }); },
  'float attribute in place': (m) => { (attribute(m, 'leaky', 'alpha').value as { f: number }).f = 0.25; },
  'int attribute in place': (m) => { (attribute(m, 'rs', 'keepdims').value as { i: number }).i = 0; },
  'ints attribute pushed': (m) => { (attribute(m, 'rs', 'axes').value as { ints: number[] }).ints.push(0); },
  'floats attribute element': (m) => { (attribute(m, 'rs', 'scales').value as { floats: number[] })!.floats[1] = 9; },
  'string attribute replaced': (m) => { (attribute(m, 'rs', 'mode').value as { s: Uint8Array }).s = new TextEncoder().encode('other'); },
  'attribute value type changed': (m) => { attribute(m, 'rs', 'keepdims').value = { type: 'FLOAT', f: 1 }; },
  'attribute order': (m) => { const a = node(m, 'rs').attributes; [a[0], a[2]] = [a[2]!, a[0]!]; },
  'attribute removed': (m) => { node(m, 'rs').attributes.pop(); },
  'attribute renamed': (m) => { attribute(m, 'leaky', 'alpha').name = 'beta'; },
  'branches swapped': (m) => {
    const [a, b] = node(m, 'if').attributes;
    const va = a!.value; a!.value = b!.value; b!.value = va;
  },
  'subgraph node op type': (m) => { (attribute(m, 'if', 'then_branch').value as { g: Graph }).g.nodes[0]!.opType = 'Relu'; },
  'subgraph name': (m) => { (attribute(m, 'if', 'else_branch').value as { g: Graph }).g.name = 'otherwise'; },
  'raw tensor storage replaced': (m) => { init(m, 's').storage = { kind: 'raw', bytes: new Uint8Array(new Float32Array([4, 9]).buffer) }; },
  'typed tensor storage replaced': (m) => { init(m, 'typed').storage = { kind: 'float_data', values: new Float32Array([1, -1]) }; },
  'typed tensor value in place': (m) => { (init(m, 'typed').storage as { values: Float32Array }).values[0] = 42; },
  'tensor dims and name': (m) => { const t = init(m, 'k'); t.dims = [1, 2]; t.name = 'k2'; },
  'tensor data type': (m) => { init(m, 'k').dataType = T.INT32; },
  'initializers swapped': (m) => { const l = m.graph.initializers; [l[0], l[2]] = [l[2]!, l[0]!]; },
  'initializer removed': (m) => { m.graph.initializers.pop(); },
  'value info shape': (m) => { m.graph.valueInfo[0]!.shape = [3, 'n']; },
  'input element type': (m) => { m.graph.inputs[0]!.elemType = T.DOUBLE; },
  'output doc string': (m) => { m.graph.outputs[0]!.docString = 'the result'; },
  'value info removed': (m) => { m.graph.valueInfo.length = 0; },
  'graph name': (m) => { m.graph.name = 'renamed'; },
  'opset version': (m) => { m.opsets[0]!.version = 18; },
  'producer name': (m) => { m.producerName = 'someone else'; },
  'metadata added': (m) => { m.metadata.push(['k', 'v']); },
  'model doc string': (m) => { m.docString = 'doc'; },
};

describe('write-time change detection', () => {
  it('writes an unchanged model byte-identical', () => {
    const bytes = sample();
    expect(Buffer.from(serializeModel(parseModel(bytes, '/x'))).equals(Buffer.from(bytes))).toBe(true);
  });

  for (const [what, change] of Object.entries(changes)) {
    it(`carries a change made without touch(): ${what}`, () => {
      const bytes = sample();
      const m = parseModel(bytes, '/x');
      const before = JSON.stringify(project(m));
      change(m);
      const expected = JSON.stringify(project(m));
      expect(expected).not.toBe(before); // the change is real
      const out = serializeModel(m);
      expect(JSON.stringify(project(decodeModel(out, '/x')))).toBe(expected);
    });
  }

  it('carries any mix of changes made without touch() (seeded)', () => {
    const names = Object.keys(changes);
    for (let seed = 1; seed <= 40; seed++) {
      const r = rng(seed);
      const m = parseModel(sample(), '/x');
      const picked = names.filter(() => r() < 0.2);
      for (const name of picked) {
        try { changes[name]!(m); } catch { /* an earlier change removed what this one edits */ }
      }
      const expected = JSON.stringify(project(m));
      expect(JSON.stringify(project(decodeModel(serializeModel(m), '/x'))), `seed ${seed}: ${picked.join(', ')}`).toBe(expected);
    }
  });
});
