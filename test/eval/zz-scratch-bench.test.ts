import { it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import * as ort from 'onnxruntime-node';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';

import { findKernel } from '../../src/eval/registry.js';
const prof = new Map<string, number>();
for (const op of ['Conv', 'BatchNormalization', 'Relu', 'GlobalAveragePool', 'Flatten', 'Gemm']) {
  const k = findKernel('', op, 13)!; const orig = k.run;
  (k as { run: typeof orig }).run = (i, c) => { const t = performance.now(); const r = orig(i, c); const key = op === 'Conv' ? `Conv g${c.node.attributes.find((a) => a.name === 'group')?.value.type === 'INT' ? ((c.node.attributes.find((a) => a.name === 'group')!.value as { i: number }).i > 1 ? 'dw' : '1') : '?'} k${(c.node.attributes.find((a) => a.name === 'kernel_shape')!.value as { ints: number[] }).ints[0]}` : op; prof.set(key, (prof.get(key) ?? 0) + performance.now() - t); return r; };
}
it('mobilenet-ish', async () => {
  const r = rng(1);
  const g = new GraphBuilder();
  g.input('x', [1, 3, 224, 224]).output('y', [1, 1000]);
  let cur = 'x', C = 3, k = 0;
  const convBnRelu = (cin: number, cout: number, ks: number, stride: number, group: number) => {
    const id = k++;
    const w = g.init(`w${id}`, [cout, cin / group, ks, ks], randn(r, cout * (cin / group) * ks * ks, Math.sqrt(2 / ((cin / group) * ks * ks))));
    const p = (ks - 1) / 2;
    let y = g.node('Conv', [cur, w], { kernel_shape: [ks, ks], strides: [stride, stride], pads: [p, p, p, p], group });
    y = g.node('BatchNormalization', [y, g.init(`s${id}`, [cout], uniform(r, cout, 0.5, 1.5)), g.init(`b${id}`, [cout], randn(r, cout, 0.1)),
      g.init(`m${id}`, [cout], randn(r, cout, 0.1)), g.init(`v${id}`, [cout], uniform(r, cout, 0.5, 1.5))], { epsilon: f(1e-5) });
    cur = g.node('Relu', [y]);
    C = cout;
  };
  convBnRelu(3, 32, 3, 2, 1);
  const cfg: Array<[number, number]> = [[64, 1], [128, 2], [128, 1], [256, 2], [256, 1], [512, 2], [512, 1], [512, 1], [512, 1], [512, 1], [512, 1], [1024, 2], [1024, 1]];
  for (const [cout, s] of cfg) { convBnRelu(C, C, 3, s, C); convBnRelu(C, cout, 1, 1, 1); }
  cur = g.node('GlobalAveragePool', [cur]);
  cur = g.node('Flatten', [cur]);
  g.node('Gemm', [cur, g.init('fw', [1000, 1024], randn(r, 1024000, 0.03)), g.init('fb', [1000], randn(r, 1000, 0.1))], { transB: 1 }, { outputs: ['y'] });
  const bytes = modelBytes(g, { opset: 13 });
  const x = randn(r, 3 * 224 * 224);
  const model = parseModel(bytes, '.');
  const feeds = { x: { dims: [1, 3, 224, 224], data: x } };
  const inputs = new Map([['x', { type: 1, dims: [1, 3, 224, 224], data: Float64Array.from(x) }]]);
  const ref = await runOrt(bytes, feeds);
  const sess = await ort.InferenceSession.create(bytes, { graphOptimizationLevel: 'disabled', intraOpNumThreads: 1, interOpNumThreads: 1, executionProviders: ['cpu'] });
  const ft = { x: new ort.Tensor('float32', x, [1, 3, 224, 224]) };
  await sess.run(ft);
  let t = performance.now(); for (let i = 0; i < 5; i++) await sess.run(ft); const ortMs = (performance.now() - t) / 5;
  for (const precision of ['float32', 'float64'] as const) {
    runModel(model, inputs, { precision });
    t = performance.now(); let out; for (let i = 0; i < 3; i++) out = runModel(model, inputs, { precision }); const ms = (performance.now() - t) / 3;
    const d = maxDiff(out!.get('y')!.data, ref!.y!.data);
    console.log([...prof].map(([k, v]) => `${k}: ${(v / 4).toFixed(1)}`).join(', ')); prof.clear();
    console.log(precision, ms.toFixed(1), 'ms; ort', ortMs.toFixed(1), 'ms; ratio', (ms / ortMs).toFixed(2), 'maxAbs', d.maxAbs, 'scale', d.scale);
  }
}, 300000);
