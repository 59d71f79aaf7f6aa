// Constant nodes are constants in every form (ONNX Constant-12+: value, value_float(s), value_int(s)):
// norm parameters and layer biases written as shorthand lists fold like initializers.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng, uniform, f, fs } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { foldModel } from '../../src/fold/index.js';

describe('Constant shorthand attributes', () => {
  it('folds a BatchNormalization whose statistics and the layer bias are value_floats Constants', async () => {
    const r = rng(31);
    const g = new GraphBuilder();
    g.input('x', [2, 6]).output('y', [2, 4]);
    const list = (name: string, v: Float32Array) => g.node('Constant', [], { value_floats: fs(Array.from(v)) }, { name: `${name}_c`, outputs: [name] });
    g.init('W', [4, 6], randn(r, 24));
    list('C', randn(r, 4)); // Gemm bias as a shorthand constant: must be cloned, not edited in place
    list('s', uniform(r, 4, 0.5, 1.5)); list('b', randn(r, 4)); list('m', randn(r, 4)); list('v', uniform(r, 4, 0.2, 2));
    const y = g.node('Gemm', ['x', 'W', 'C'], { transB: 1 }, { name: 'gemm' });
    g.node('BatchNormalization', [y, 's', 'b', 'm', 'v'], { epsilon: f(1e-5) }, { name: 'bn', outputs: ['y'] });
    const bytes = modelBytes(g);
    const m = parseModel(Uint8Array.from(bytes), '/x'); // a copy: folding reuses the parsed buffer in place
    const { ledger } = foldModel(m);
    expect(ledger.normalizations.map((n) => [n.status, n.target])).toEqual([['folded', 'gemm']]);
    const out = serializeModel(m);
    const x = randn(rng(2), 12);
    // Source: onnxruntime-node, original against folded
    const a = await runOrt(bytes, { x: { dims: [2, 6], data: x } });
    const b = await runOrt(out, { x: { dims: [2, 6], data: x } });
    const d = maxDiff(b.y!.data, a.y!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * d.scale);
    // the norm's Constant nodes are gone; the bias Constant was replaced by a folded initializer
    const folded = parseModel(out, '/x');
    expect(folded.graph.nodes.map((n) => n.opType)).toEqual(['Gemm']);
  });
});
