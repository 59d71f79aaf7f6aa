// Audit lists the remaining runtime-statistics norms too: GroupNormalization (opset 18) and
// MeanVarianceNormalization, inside an If branch as well as in the main graph.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { analyze } from '../../src/fold/index.js';

describe('audit: group and mean-variance normalization', () => {
  it('reports both as kept with runtime-statistics, in the main graph and in a subgraph', () => {
    const r = rng(3);
    const g = new GraphBuilder();
    g.input('x', [2, 4, 5, 5]).input('c', [], 9).output('y1').output('y2');
    g.init('gs', [4], randn(r, 4)); g.init('gb', [4], randn(r, 4));
    g.node('GroupNormalization', ['x', 'gs', 'gb'], { num_groups: 2 }, { name: 'gn', outputs: ['y1'] });
    const then = new GraphBuilder('then');
    then.node('MeanVarianceNormalization', ['x'], { axes: [0, 2, 3] }, { name: 'mvn', outputs: ['t_out'] });
    then.output('t_out');
    const other = new GraphBuilder('else');
    other.node('Identity', ['x'], {}, { name: 'id', outputs: ['e_out'] });
    other.output('e_out');
    g.node('If', ['c'], { then_branch: then, else_branch: other }, { name: 'branch', outputs: ['y2'] });
    const found = analyze(parseModel(modelBytes(g, { opset: 18 }), '/x'));
    expect(found.map((x) => [x.node, x.op, x.status, x.reason, x.graph])).toEqual([
      ['gn', 'GroupNormalization', 'kept', 'runtime-statistics', 'main'],
      ['mvn', 'MeanVarianceNormalization', 'kept', 'runtime-statistics', 'main/branch.then_branch'],
    ]);
    for (const x of found) expect((x.hint ?? x.effect)!.length).toBeGreaterThan(10);
  });
});
