// The neighbourhood sketches an HTML report draws, checked against a breadth-first walk written here from the
// graph's own input and output names (independent of the use-def index the sketches use), on the demo models.
import { describe, expect, it } from 'vitest';
import { join } from 'node:path';
import { readModelFile } from '../../src/onnx/read.js';
import { analyze, foldModel } from '../../src/fold/index.js';
import { MAX_NODES, sketches } from '../../src/fold/sketch.js';
import type { Graph } from '../../src/graph/ir.js';
import { ROOT } from '../helpers/cli.js';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';

/** Names of the nodes within `hops` of `start` (a named node), walking through shared values both ways. */
function walk(g: Graph, start: string, hops: number): Set<string> {
  const near = (a: (typeof g.nodes)[number], b: (typeof g.nodes)[number]) =>
    a.outputs.some((v) => v && b.inputs.includes(v)) || b.outputs.some((v) => v && a.inputs.includes(v));
  let seen = new Set([start]), frontier = [start];
  for (let h = 0; h < hops; h++) {
    const next: string[] = [];
    for (const name of frontier) {
      const n = g.nodes.find((x) => x.name === name)!;
      for (const m of g.nodes) if (!seen.has(m.name) && near(n, m)) { seen.add(m.name); next.push(m.name); }
    }
    frontier = next;
  }
  return seen;
}

describe('sketches', () => {
  for (const file of ['tray-sorter.onnx', 'pump-vibration.onnx', 'tray-edge.onnx']) {
    it(`${file}: every norm's drawing holds exactly the nodes within two hops, roles and padding marked, edges along values`, () => {
      const path = join(ROOT, 'models', file);
      const model = readModelFile(path);
      const findings = analyze(model);
      const list = sketches(model, findings);
      expect(list.map((s) => s.node)).toEqual(findings.map((f) => f.node));
      for (const [i, s] of list.entries()) {
        const want = walk(model.graph, s.node, 2);
        expect(s.before.omitted).toBe(Math.max(0, want.size - MAX_NODES));
        if (want.size <= MAX_NODES) expect(new Set(s.before.nodes.map((n) => n.id))).toEqual(want);
        const norm = s.before.nodes.filter((n) => n.role === 'norm');
        expect(norm.map((n) => n.id)).toEqual([s.node]);
        const target = findings[i]!.target;
        if (target && want.has(target)) expect(s.before.nodes.find((n) => n.id === target)!.role).toBe('target');
        for (const n of s.before.nodes) {
          const node = model.graph.nodes.find((x) => x.name === n.id)!;
          expect(n.op).toBe(node.opType);
          const pads = node.attributes.find((a) => a.name === 'pads');
          const padded = node.opType === 'Pad' || (pads?.value.type === 'INTS' && pads.value.ints.some((p) => p !== 0));
          expect(n.padded === true).toBe(padded);
        }
        for (const e of s.before.edges) {
          expect(model.graph.nodes.find((x) => x.name === e.from)!.outputs).toContain(e.value);
          expect(model.graph.nodes.find((x) => x.name === e.to)!.inputs).toContain(e.value);
        }
        expect(s.after).toBeUndefined(); // an audit has no folded model
      }
    });
  }

  it('tray sorter: the kept norm shows the second reader that keeps it; a fold shows the layer after, without the norm', () => {
    const path = join(ROOT, 'models', 'tray-sorter.onnx');
    const before = readModelFile(path), after = readModelFile(path);
    const { ledger } = foldModel(after);
    const list = sketches(before, ledger.normalizations, after);
    const tap = list.find((s) => s.node === 'tap.bn')!;
    expect(ledger.normalizations.find((e) => e.node === 'tap.bn')!.reason).toBe('shared-output');
    const readers = tap.before.edges.filter((e) => e.from === 'tap.conv').map((e) => e.to).sort();
    expect(readers).toEqual(['place.pool', 'tap.bn']);
    expect(tap.after).toBeUndefined();
    const stem = list.find((s) => s.node === 'stem.bn')!;
    expect(stem.after!.nodes.map((n) => n.id)).not.toContain('stem.bn');
    expect(stem.after!.nodes.find((n) => n.id === 'stem.conv')!.role).toBe('target');
    expect(new Set(stem.after!.nodes.map((n) => n.id))).toEqual(walk(after.graph, 'stem.conv', 2));
  });

  it('a wide neighbourhood is cut at MAX_NODES and says how many neighbours were left out', () => {
    // a conv whose output 40 Relu nodes read besides the norm (so the norm is kept, shared-output)
    const g = new GraphBuilder();
    g.input('x', [1, 2, 4, 4]);
    const r = rng(3);
    const c = g.node('Conv', ['x', g.init('w', [2, 2, 1, 1], randn(r, 4))], {}, { name: 'conv' });
    const bn = g.node('BatchNormalization', [c, g.init('s', [2], [1, 2]), g.init('b', [2], [0, 1]), g.init('m', [2], [0, 0]), g.init('v', [2], [1, 1])], {}, { name: 'bn' });
    g.output(bn);
    for (let i = 0; i < 40; i++) g.output(g.node('Relu', [c], {}, { name: `reader${i}` }));
    const model = parseModel(modelBytes(g), '/x');
    const findings = analyze(model);
    const [s] = sketches(model, findings);
    const want = walk(model.graph, 'bn', 2);
    expect(want.size).toBe(42);
    expect(s!.before.nodes).toHaveLength(MAX_NODES);
    expect(s!.before.omitted).toBe(42 - MAX_NODES);
    expect(s!.before.nodes.map((n) => n.id)).toEqual(expect.arrayContaining(['conv', 'bn']));
  });
});

describe('--clone-shared', () => {
  it('the drawing after the fold is centred on the copy the norm folded into, the original beside it untouched', () => {
    // conv feeds output B and a norm (output A): the norm gets its own copy of conv, folded; conv stays for B
    const g = new GraphBuilder();
    g.input('x', [1, 2, 4, 4]).output('A').output('B');
    g.node('Conv', ['x', g.init('w', [2, 2, 1, 1], randn(rng(5), 4))], {}, { name: 'conv', outputs: ['B'] });
    g.node('BatchNormalization', ['B', g.init('s', [2], [1, 2]), g.init('b', [2], [0, 1]), g.init('m', [2], [0, 0]), g.init('v', [2], [1, 3])], {}, { name: 'bn', outputs: ['A'] });
    g.node('Relu', ['A'], {}, { name: 'after_a', outputs: ['A2'] });
    g.output('A2');
    const bytes = modelBytes(g);
    const before = parseModel(Uint8Array.from(bytes), '/x'), after = parseModel(Uint8Array.from(bytes), '/x');
    const { ledger } = foldModel(after, { cloneShared: true });
    const e = ledger.normalizations.find((x) => x.node === 'bn')!;
    expect([e.status, e.target, e.copy]).toEqual(['folded', 'conv', 'conv.clone']);
    const [s] = sketches(before, ledger.normalizations, after);
    // two hops around the copy in the folded graph: the copy, its reader after_a (through A); x is a graph input
    expect(new Set(s!.after!.nodes.map((n) => n.id))).toEqual(walk(after.graph, 'conv.clone', 2));
    expect(s!.after!.nodes.find((n) => n.id === 'conv.clone')!.role).toBe('target');
    expect(s!.after!.nodes.map((n) => n.id)).toContain('after_a');
  });
});
