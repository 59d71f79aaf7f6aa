// Work bounds (src/eval/limits.ts): small inputs that would make one kernel run for hours or allocate
// gigabytes are refused with an unsupported-op error naming the node, before any work starts.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, T, modelBytes } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import { PleatError } from '../../src/errors.js';
import { MAX_KERNEL_STEPS, MAX_MADE_ELEMENTS } from '../../src/eval/limits.js';

function refusal(build: (g: GraphBuilder) => void, opset = 17): PleatError {
  const g = new GraphBuilder();
  g.output('y');
  build(g);
  const m = parseModel(modelBytes(g, { opset }), '.');
  const t = Date.now();
  try { runModel(m, new Map(), { precision: 'float64' }); } catch (e) {
    expect(Date.now() - t).toBeLessThan(30_000); // refused before the work, not after it
    return e as PleatError;
  }
  throw new Error('ran');
}

describe('kernel work bounds', () => {
  it(`an Einsum needing more than ${MAX_KERNEL_STEPS} steps is refused`, () => {
    const e = refusal((g) => {
      for (const n of ['a', 'b', 'c', 'd']) g.init(n, [400], new Array(400).fill(1));
      g.node('Einsum', ['a', 'b', 'c', 'd'], { equation: 'i,j,k,l->' }, { name: 'huge_sum', outputs: ['y'] });
    });
    expect(e.kind).toBe('unsupported-op');
    expect(e.message).toMatch(/huge_sum.*equation 'i,j,k,l->' takes 1\.02e\+11 steps/);
  });
  it(`a window or DFT length past ${MAX_MADE_ELEMENTS} elements is refused`, () => {
    const w = refusal((g) => {
      g.init('n', [], [1e9], T.INT64);
      g.node('HannWindow', ['n'], {}, { name: 'wide', outputs: ['y'] });
    });
    expect(w.kind).toBe('unsupported-op');
    expect(w.message).toMatch(/wide.*the window would hold 1000000000 elements/);
    const d = refusal((g) => {
      g.init('x', [1, 4, 1], [1, 2, 3, 4]);
      g.init('len', [], [2 ** 28], T.INT64);
      g.node('DFT', ['x', 'len'], {}, { name: 'long_dft', outputs: ['y'] });
    });
    expect(d.message).toMatch(/long_dft.*the DFT output would hold/);
    const m = refusal((g) => {
      g.init('mels', [], [64], T.INT64); g.init('dft', [], [2 ** 24], T.INT64); g.init('rate', [], [16000], T.INT64);
      g.init('lo', [], [0]); g.init('hi', [], [8000]);
      g.node('MelWeightMatrix', ['mels', 'dft', 'rate', 'lo', 'hi'], {}, { name: 'mel', outputs: ['y'] });
    });
    expect(m.message).toMatch(/mel.*the mel weight matrix would hold/);
  });
});
