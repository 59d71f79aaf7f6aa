import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, T, f } from './build.js';
import { runOrt } from './ort.js';

describe('test helpers', () => {
  it('builds a model that onnxruntime-node runs (BatchNormalization formula from the ONNX operator docs)', async () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2, 1, 1]).output('y', [1, 2, 1, 1]);
    g.init('s', [2], [1, 2]); g.init('b', [2], [0, 1]); g.init('m', [2], [0.5, 0]); g.init('v', [2], [1, 4]);
    g.node('BatchNormalization', ['x', 's', 'b', 'm', 'v'], { epsilon: f(0) }, { outputs: ['y'] });
    const out = await runOrt(modelBytes(g), { x: { dims: [1, 2, 1, 1], data: new Float32Array([1.5, 2]) } });
    // Y = (X - mean) / sqrt(var + eps) * scale + B: (1.5-0.5)/1*1+0 = 1; (2-0)/2*2+1 = 3
    expect(Array.from(out.y!.data)).toEqual([1, 3]);
    expect(T.FLOAT).toBe(1);
  });
});
