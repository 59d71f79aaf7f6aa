import { it } from 'vitest';
import { GraphBuilder, f, randn, rng, modelBytes } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { foldModel } from '../../src/fold/index.js';
import { proveFold } from '../../src/verify/prove.js';
import { dir } from '../fold/harness.js';
it('dbg', () => {
  const g = new GraphBuilder();
  g.input('x', [2, 5, 8]).output('y0').output('y1');
  const ln = g.node('LayerNormalization', ['x', g.init('s', [8], randn(rng(1), 8, 0.5, 1)), g.init('b', [8], randn(rng(2), 8))], { axis: -1 }, { name: 'ln' });
  const q = g.node('MatMul', [ln, g.init('wq', [8, 8], randn(rng(3), 64))], {}, { name: 'q' });
  g.node('Add', [q, g.init('bq', [8], randn(rng(4), 8))], {}, { name: 'qa', outputs: ['y0'] });
  g.node('MatMul', [ln, g.init('wk', [8, 8], randn(rng(5), 64))], {}, { name: 'k', outputs: ['y1'] });
  const { ledger } = foldModel(parseModel(modelBytes(g), dir), { prove: (c) => { const r = proveFold(c); console.log(JSON.stringify(r), c.before.nodes.map(n=>n.name+':'+n.inputs.join(',')), c.after.nodes.map(n=>n.name+':'+n.inputs.join(',')), c.before.inputs.map(i=>i.name), c.after.inputs.map(i=>i.name)); return r.passed; } });
  console.log(ledger.normalizations);
});
