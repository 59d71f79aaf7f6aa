// survey lists as model inputs only the graph inputs no initializer gives a default (ONNX IR: an initializer may
// also be listed as a graph input, and before IR version 4 every one had to be). Seeded models list a random
// part of their initializers as inputs too, in random order; the answer is checked against a plain search.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, rng, T } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { surveyModel } from '../../src/jobs/survey.js';

describe('survey inputs', () => {
  for (const seed of [1, 2, 3, 4, 5]) {
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
