// survey lists as model inputs only the graph inputs no initializer gives a default (ONNX IR: an initializer may
// also be listed as a graph input, and before IR version 4 every one had to be). Seeded models list a random
// part of their initializers as inputs too, in random order; the answer is checked against a plain search.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, rng, T } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { surveyModel } from '../../src/jobs/survey.js';
import { surveyText } from '../../src/report/survey-text.js';
import { eachTensor } from '../../src/onnx/external.js';
import { elementCount, storageKind, subgraphsOf, type Graph, type Tensor } from '../../src/graph/ir.js';
import { bytesPerElement, tensorByteSize } from '../../src/graph/tensor.js';
import { randomCase } from '../fold/random-graphs.js';

describe('survey inputs', () => {
  // (seeds giving up to 8 inputs and more: survey compares with a few inputs directly and looks up many in a set)
  for (const seed of [1, 2, 3, 4, 5, 6, 7, 8, 9, 10]) {
    it(`leaves out inputs that initializers give defaults (seed ${seed})`, () => {
      const r = rng(seed);
      const g = new GraphBuilder('g');
      const count = 1 + Math.floor(r() * 40);
      const listed: string[] = [];
      g.input('x', [1]);
      let last = 'x';
      for (let i = 0; i < count; i++) {
        const w = `w${i}`;
        g.init(w, [1], [r()], T.FLOAT);
        if (r() < 0.5) listed.push(w);
        last = g.node('Add', [last, w], {}, { outputs: [`a${i}`] });
      }
      // a few plain inputs too, and the listed initializers in shuffled order
      const plain = Array.from({ length: Math.floor(r() * 4) }, (_, i) => `p${i}`);
      for (const p of plain) g.input(p, [1]);
      for (const w of [...listed].sort(() => r() - 0.5)) g.input(w, [1]);
      g.output(last, [1]);
      const m = parseModel(modelBytes(g), '/x');
      const report = surveyModel(m);
      const expected = m.graph.inputs.filter((v) => !m.graph.initializers.some((t) => t.name === v.name)).map((v) => v.name);
      expect(report.inputs.map((v) => v.name)).toEqual(expected);
      expect(report.inputs.map((v) => v.name)).toEqual(['x', ...plain]);
    });
  }
});

describe('survey figures', () => {
  // Reference: a separate pass per figure over every tensor (eachTensor), as survey once counted them.
  it('counts tensors, constants and external bytes as separate passes would (seeded graphs with bodies)', () => {
    // (two spellings of one file count twice; the fullwidth A sorts before the emoji in UTF-8, after it in UTF-16)
    const LOCATIONS = ['w.bin', './w.bin', 'norm/p.bin', 'Z.bin', '\uff21.bin', '\u{1f600}.bin'];
    for (let seed = 1; seed <= 25; seed++) {
      const m = parseModel(randomCase(seed).bytes, '/x', `seed ${seed}`);
      // make some tensors external (left unloaded: their dims say their size), bodies and Constant nodes included
      const r = rng(seed);
      eachTensor(m.graph, (t) => {
        if (r() < 0.3) t.storage = { kind: 'external', entries: [['location', LOCATIONS[Math.floor(r() * LOCATIONS.length)]!]], bytes: new Uint8Array(0) };
      });
      const size = (t: Tensor) => storageKind(t) === 'external' ? elementCount(t.dims) * bytesPerElement(t.dataType)! : tensorByteSize(t);
      let external = 0, inits = 0, initBytes = 0, consts = 0, constBytes = 0, nodes = 0;
      eachTensor(m.graph, (t) => { if (storageKind(t) === 'external') external += size(t); });
      const walk = (g: Graph) => {
        for (const t of g.initializers) { inits++; initBytes += size(t); }
        for (const n of g.nodes) {
          nodes++;
          if (n.opType === 'Constant') { consts++; for (const a of n.attributes) if (a.value.type === 'TENSOR') constBytes += size(a.value.t); }
          subgraphsOf(n).forEach(walk);
        }
      };
      walk(m.graph);
      const report = surveyModel(m);
      expect(report.externalBytes, `seed ${seed}`).toBe(external);
      // side files: each location once, in UTF-8 byte order (as the provenance digest lists them), worked out here
      const named = new Set<string>();
      eachTensor(m.graph, (t) => { if (t.storage.kind === 'external') named.add(t.storage.entries.find(([k]) => k === 'location')![1]); });
      const utf8Order = [...named].sort((x, y) => Buffer.compare(Buffer.from(x), Buffer.from(y)));
      expect(report.sideFiles, `seed ${seed}`).toEqual(utf8Order);
      expect(external).toBeGreaterThan(0);
      expect(report.initializers).toEqual({ count: inits, bytes: initBytes });
      expect(report.constantNodes).toEqual({ count: consts, bytes: constBytes });
      expect(report.nodeCount).toBe(nodes);
    }
  });
});

describe('the side file line of the text survey', () => {
  it('splits back into the side files whatever their names hold (commas, quotes, a line end)', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2]).output('y', [1, 2]);
    g.init('w', [2], new Float32Array([1, 2]));
    g.node('Add', ['x', 'w'], {}, { outputs: ['y'] });
    const m = parseModel(modelBytes(g), '/x');
    const names = ['a, b.bin', "it's.bin", 'q"uote.bin', 'line\nend.bin'];
    const w = m.graph.initializers[0]!;
    w.storage = { kind: 'external', entries: [['location', names[0]!]], bytes: new Uint8Array(0) };
    const extra = names.slice(1).map((n, i) => ({ ...w, name: `w${i}`, storage: { kind: 'external' as const, entries: [['location', n]] as Array<[string, string]>, bytes: new Uint8Array(0) } }));
    m.graph.initializers.push(...extra);
    const report = surveyModel(m);
    const line = surveyText(report).split('\n').find((l) => l.startsWith('  side file'))!;
    expect(JSON.parse(`[${line.slice('  side file '.length)}]`)).toEqual(report.sideFiles);
    expect([...report.sideFiles].sort()).toEqual([...names].sort());
  });
});
