// evaluatorGaps: the operators of a model the evaluator cannot run, looked up in the registry at the model's
// opset (subgraphs included), with random operators named as such.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { evaluatorGaps } from '../../src/eval/coverage.js';
import { runModel } from '../../src/eval/run.js';

function model(build: (g: GraphBuilder) => void, opset = 17, extra: Array<[string, number]> = []) {
  const g = new GraphBuilder();
  build(g);
  return parseModel(modelBytes(g, { opset, extraOpsets: extra }), '.');
}

describe('evaluatorGaps', () => {
  it('is empty when every operator has a kernel', () => {
    const m = model((g) => {
      g.input('x', [1, 4]).output('y');
      g.node('Relu', ['x'], {}, { outputs: ['r'] });
      g.node('TopK', ['r', 'k'], {}, { outputs: ['y', 'i'] });
      g.init('k', [1], [2], 7);
    });
    expect(evaluatorGaps(m)).toEqual([]);
  });

  it('names operators without a kernel, random ones and other domains, counting nodes in subgraphs', () => {
    const branch = new GraphBuilder('then');
    branch.output('b');
    branch.node('NoSuchOp', ['x'], {}, { outputs: ['b'] });
    const m = model((g) => {
      g.input('x', [1, 4]).input('c', [], 9).output('y').output('z').output('w');
      g.node('NoSuchOp', ['x'], {}, { outputs: ['n'] });
      g.node('If', ['c'], { then_branch: branch, else_branch: branch }, { outputs: ['y'] });
      g.node('RandomUniformLike', ['n'], {}, { outputs: ['z'] });
      g.node('Thing', ['x'], {}, { outputs: ['w'], domain: 'example.custom' });
    }, 17, [['example.custom', 1]]);
    expect(evaluatorGaps(m)).toEqual([
      { op: 'NoSuchOp', opset: 17, count: 3, reason: 'no-kernel' },
      { op: 'RandomUniformLike', opset: 17, count: 1, reason: 'random' },
      { op: 'example.custom.Thing', opset: 1, count: 1, reason: 'no-kernel' },
    ]);
  });

  it('looks kernels up at the model opset (Trilu exists from opset 14)', () => {
    const build = (g: GraphBuilder) => { g.input('x', [2, 2]).output('y'); g.node('Trilu', ['x'], {}, { outputs: ['y'] }); };
    expect(evaluatorGaps(model(build, 13))).toEqual([{ op: 'Trilu', opset: 13, count: 1, reason: 'no-kernel' }]);
    expect(evaluatorGaps(model(build, 14))).toEqual([]);
  });
});

describe('what survey calls runnable runs', () => {
  // evaluatorGaps looks operators up by opset only, so every form of an operator pleat has a kernel for must run;
  // these are forms a kernel once refused while survey called the model runnable.
  const cases: Array<{ what: string; opset: number; build: (g: GraphBuilder) => void; x: number[] }> = [
    ...[11, 13].map((opset) => ({
      what: `Resize coordinate_transformation_mode tf_half_pixel_for_nn (Resize-${opset} operator doc)`, opset, x: [1, 1, 3, 4],
      build: (g: GraphBuilder) => {
        g.input('x', [1, 1, 3, 4]).output('y');
        g.init('roi', [0], []); g.init('s', [4], [1, 1, 1.5, 0.5]);
        g.node('Resize', ['x', 'roi', 's'], { mode: 'nearest', coordinate_transformation_mode: 'tf_half_pixel_for_nn' }, { outputs: ['y'] });
      },
    })),
    ...[2, 11, 18].map((opset) => ({
      what: `LpPool (LpPool-${opset} operator doc)`, opset, x: [1, 2, 5],
      build: (g: GraphBuilder) => {
        g.input('x', [1, 2, 5]).output('y');
        g.node('LpPool', ['x'], { kernel_shape: [2], p: 3 }, { outputs: ['y'] });
      },
    })),
    {
      what: 'GlobalLpPool (GlobalLpPool-2 operator doc)', opset: 2, x: [1, 2, 3, 3],
      build: (g: GraphBuilder) => { g.input('x', [1, 2, 3, 3]).output('y'); g.node('GlobalLpPool', ['x'], {}, { outputs: ['y'] }); },
    },
  ];
  for (const c of cases) {
    it(c.what, () => {
      const m = model(c.build, c.opset);
      expect(evaluatorGaps(m)).toEqual([]);
      const x = { type: 1, dims: c.x, data: Float64Array.from({ length: c.x.reduce((a, b) => a * b, 1) }, (_, i) => i) };
      const out = runModel(m, new Map([['x', x]]), { precision: 'float64' });
      expect(out.get('y')).toBeDefined();
    });
  }
});
