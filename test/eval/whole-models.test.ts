// Whole models built in the test, run by pleat's evaluator (float64 and float32) and by onnxruntime-node
// (graph optimizations disabled, the independent reference): residual CNN, depthwise CNN, 1-D conv stack,
// MLP, transposed-conv decoder, and the three demo models.
import { describe, expect, it } from 'vitest';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import type { Value } from '../../src/eval/value.js';
import { ROOT } from '../helpers/cli.js';

type Build = (g: GraphBuilder, r: () => number) => { input: string; dims: number[] };

function convBnRelu(g: GraphBuilder, r: () => number, x: string, cin: number, cout: number, k: number[], o: { stride?: number; group?: number; relu?: boolean } = {}): string {
  const group = o.group ?? 1;
  const size = k.reduce((a, b) => a * b, 1);
  const w = g.init(`w${g.nodes.length}`, [cout, cin / group, ...k], randn(r, cout * (cin / group) * size, Math.sqrt(2 / ((cin / group) * size))));
  const pads = k.map((kk) => (kk - 1) >> 1);
  const c = g.node('Conv', [x, w], { kernel_shape: k, pads: [...pads, ...pads], strides: k.map(() => o.stride ?? 1), group });
  const p = (name: string, v: Float32Array) => g.init(`${name}${g.nodes.length}`, [cout], v);
  const bn = g.node('BatchNormalization', [c, p('s', uniform(r, cout, 0.5, 1.5)), p('b', randn(r, cout, 0.2)), p('m', randn(r, cout, 0.3)), p('v', uniform(r, cout, 0.3, 2))], { epsilon: f(1e-5) });
  return o.relu === false ? bn : g.node('Relu', [bn]);
}

const MODELS: Record<string, Build> = {
  'residual CNN': (g, r) => {
    g.input('x', [2, 3, 16, 16]);
    let h = convBnRelu(g, r, 'x', 3, 8, [3, 3]);
    for (let b = 0; b < 2; b++) {
      const a = convBnRelu(g, r, h, 8, 8, [3, 3]);
      const c = convBnRelu(g, r, a, 8, 8, [3, 3], { relu: false });
      h = g.node('Relu', [g.node('Add', [c, h])]);
    }
    const p = g.node('GlobalAveragePool', [h]);
    g.node('Flatten', [p], { axis: 1 }, { outputs: ['y'] });
    g.output('y');
    return { input: 'x', dims: [2, 3, 16, 16] };
  },
  'depthwise CNN': (g, r) => {
    g.input('x', [1, 4, 15, 15]);
    let h = convBnRelu(g, r, 'x', 4, 8, [3, 3], { stride: 2 });
    h = convBnRelu(g, r, h, 8, 8, [3, 3], { group: 8 });
    h = convBnRelu(g, r, h, 8, 16, [1, 1]);
    h = convBnRelu(g, r, h, 16, 16, [3, 3], { group: 16, stride: 2 });
    g.node('MaxPool', [h], { kernel_shape: [2, 2], strides: [2, 2], ceil_mode: 1 }, { outputs: ['y'] });
    g.output('y');
    return { input: 'x', dims: [1, 4, 15, 15] };
  },
  '1-D conv stack': (g, r) => {
    g.input('x', [1, 2, 64]);
    let h = convBnRelu(g, r, 'x', 2, 8, [5], { stride: 2 });
    h = convBnRelu(g, r, h, 8, 8, [3]);
    h = convBnRelu(g, r, h, 8, 16, [3], { stride: 2 });
    g.node('AveragePool', [h], { kernel_shape: [3], strides: [2], pads: [1, 1], count_include_pad: 0 }, { outputs: ['y'] });
    g.output('y');
    return { input: 'x', dims: [1, 2, 64] };
  },
  MLP: (g, r) => {
    g.input('x', [4, 10]);
    const h = g.node('Gemm', ['x', g.init('w0', [16, 10], randn(r, 160, 0.3)), g.init('b0', [16], randn(r, 16, 0.1))], { transB: 1 });
    const a = g.node('Relu', [h]);
    // BatchNormalization on (N, C) input: the dense-head form the ONNX operator documentation allows
    const n = g.node('BatchNormalization', [a, g.init('s', [16], uniform(r, 16, 0.5, 1.5)), g.init('b', [16], randn(r, 16)), g.init('m', [16], randn(r, 16)), g.init('v', [16], uniform(r, 16, 0.2, 2))], { epsilon: f(1e-5) });
    const o = g.node('MatMul', [n, g.init('w1', [16, 5], randn(r, 80, 0.3))]);
    g.node('Softmax', [o], { axis: 1 }, { outputs: ['y'] });
    g.output('y');
    return { input: 'x', dims: [4, 10] };
  },
  'transposed-conv decoder': (g, r) => {
    g.input('x', [1, 8, 5, 5]);
    const up = (x: string, cin: number, cout: number, group: number) => {
      const w = g.init(`tw${g.nodes.length}`, [cin, cout / group, 3, 3], randn(r, cin * (cout / group) * 9, 0.2));
      const t = g.node('ConvTranspose', [x, w], { kernel_shape: [3, 3], strides: [2, 2], pads: [1, 1, 1, 1], output_padding: [1, 1], group });
      const p = (name: string, v: Float32Array) => g.init(`${name}${g.nodes.length}`, [cout], v);
      return g.node('Relu', [g.node('BatchNormalization', [t, p('s', uniform(r, cout, 0.5, 1.5)), p('b', randn(r, cout, 0.2)), p('m', randn(r, cout, 0.3)), p('v', uniform(r, cout, 0.3, 2))])]);
    };
    const h = up(up('x', 8, 8, 2), 8, 4, 1);
    g.node('Sigmoid', [h], {}, { outputs: ['y'] });
    g.output('y');
    return { input: 'x', dims: [1, 8, 5, 5] };
  },
};

async function agree(bytes: Uint8Array, feeds: Record<string, { dims: number[]; data: Float32Array }>): Promise<void> {
  const model = parseModel(bytes, '/x');
  const ort = await runOrt(bytes, feeds);
  for (const precision of ['float64', 'float32'] as const) {
    const inputs = new Map<string, Value>(Object.entries(feeds).map(([k, v]) => [k, { type: 1, dims: v.dims, data: Float64Array.from(v.data) }]));
    const ours = runModel(model, inputs, { precision });
    for (const [name, ref] of Object.entries(ort)) {
      const v = ours.get(name)!;
      expect(v.dims).toEqual(ref.dims);
      const d = maxDiff(v.data, ref.data);
      // within float32 rounding of the reference's scale (onnxruntime computes in float32)
      expect(d.maxAbs, `${name} ${precision}`).toBeLessThanOrEqual(1e-5 * Math.max(d.scale, 1));
    }
  }
}

describe('whole models: pleat evaluator against onnxruntime-node', () => {
  for (const [name, build] of Object.entries(MODELS)) {
    it(name, async () => {
      const g = new GraphBuilder(name.replace(/\W+/g, '_'));
      const r = rng(name.length * 7919);
      const { input, dims } = build(g, r);
      const x = randn(rng(17), dims.reduce((a, b) => a * b, 1));
      await agree(modelBytes(g), { [input]: { dims, data: x } });
    });
  }

  for (const [file, input, dims] of [['tray-sorter.onnx', 'image', [1, 3, 64, 64]], ['pump-vibration.onnx', 'vibration', [1, 2, 256]], ['tray-edge.onnx', 'image', [1, 3, 64, 64]]] as const) {
    it(`demo model ${file}`, async () => {
      const x = randn(rng(23), dims.reduce((a, b) => a * b, 1));
      await agree(readFileSync(join(ROOT, 'models', file)), { [input]: { dims: [...dims], data: x } });
    });
  }
});
