// The clean-up drops the initializers a fold released (src/fold/cleanup.ts): in one pass when they come in the
// order of the initializer list, by a set of them otherwise. Either way the same ones must go and the others stay
// in their order. Two Conv + BatchNormalization blocks with their parameters listed in file order, reversed, and
// interleaved with tensors nobody releases (an unused initializer the model already had stays).
import { describe, expect, it } from 'vitest';
import { parseModel } from '../../src/onnx/read.js';
import { foldModel } from '../../src/fold/index.js';
import { GraphBuilder, modelBytes } from '../helpers/build.js';

type Init = [string, number[], number[]];

function model(order: (inits: Init[]) => Init[]): Uint8Array {
  const g = new GraphBuilder('main');
  g.input('x', [1, 2, 3, 3]).output('y', [1, 2, 3, 3]);
  const inits: Init[] = [];
  for (const k of [0, 1]) {
    inits.push([`w${k}`, [2, 2, 1, 1], [1, 0.5, -0.25, 2]]);
    for (const [p, v] of [['scale', [1.5, 0.5]], ['B', [0.1, -0.2]], ['mean', [0.3, 0.1]], ['var', [2, 0.5]]] as const) inits.push([`bn${k}.${p}`, [2], [...v]]);
    inits.push([`unused${k}`, [1], [7]]);
  }
  for (const [name, dims, values] of order(inits)) g.init(name, dims, values);
  g.node('Conv', ['x', 'w0'], { kernel_shape: [1, 1] }, { name: 'conv0', outputs: ['c0'] });
  g.node('BatchNormalization', ['c0', 'bn0.scale', 'bn0.B', 'bn0.mean', 'bn0.var'], {}, { name: 'bn0', outputs: ['b0'] });
  g.node('Conv', ['b0', 'w1'], { kernel_shape: [1, 1] }, { name: 'conv1', outputs: ['c1'] });
  g.node('BatchNormalization', ['c1', 'bn1.scale', 'bn1.B', 'bn1.mean', 'bn1.var'], {}, { name: 'bn1', outputs: ['y'] });
  return modelBytes(g);
}

const interleave = (a: Init[]) => a.filter((_, i) => i % 2 === 0).concat(a.filter((_, i) => i % 2 === 1));

describe('clean-up after folding', () => {
  for (const [label, order] of [['file order', (a: Init[]) => a], ['reversed', (a: Init[]) => [...a].reverse()], ['interleaved', interleave]] as const) {
    it(`drops exactly the released parameters, the rest in order (${label})`, () => {
      const m = parseModel(model(order), '/tmp');
      const before = m.graph.initializers.map((t) => t.name);
      const { ledger } = foldModel(m, {});
      expect(ledger.normalizations.filter((e) => e.status === 'folded').map((e) => e.node)).toEqual(['bn0', 'bn1']);
      const names = m.graph.initializers.map((t) => t.name);
      // the weights and the unused tensors stay where they were, the new biases come last
      expect(names).toEqual([...before.filter((n) => !n.startsWith('bn')), 'conv0.bias', 'conv1.bias']);
    });
  }
});
