// A model holding QuantizeLinear/DequantizeLinear pairs: the fold keeps its quantized-weights refusal for the
// layer whose weights are dequantized at run time, folds the float layer, and the whole-model check runs the
// quantized operators (it was skipped for lack of kernels before). Outside check: onnxruntime-node runs the
// original and the written model, which agree within the check's own gate.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, T, f, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { maxDiff, runOrt } from '../helpers/ort.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)

function qdqModel(): Uint8Array {
  const r = rng(5);
  const g = new GraphBuilder();
  g.input('x', [1, 3, 8, 8]).output('y', [1, 4, 4, 4]);
  const qdq = (name: string, input: string, scale: number, zero: number) => {
    const s = g.init(`${name}_s`, [], [scale]), z = g.init(`${name}_z`, [], [zero], T.UINT8);
    const q = g.node('QuantizeLinear', [input, s, z], {}, { name: `${name}_q` });
    return g.node('DequantizeLinear', [q, s, z], {}, { name: `${name}_dq` });
  };
  const bn = (name: string, input: string, c: number) => g.node('BatchNormalization', [input,
    g.init(`${name}_g`, [c], uniform(r, c, 0.5, 1.5)), g.init(`${name}_b`, [c], randn(r, c, 0.2)),
    g.init(`${name}_m`, [c], randn(r, c, 0.1)), g.init(`${name}_v`, [c], uniform(r, c, 0.5, 2))], { epsilon: f(1e-5) }, { name });
  const a = qdq('in', 'x', 0.02, 128);
  const c1 = g.node('Conv', [a, g.init('w1', [4, 3, 3, 3], randn(r, 108, 0.3))], { pads: [1, 1, 1, 1] }, { name: 'conv_float' });
  const b1 = bn('bn_float', c1, 4);
  const a2 = qdq('mid', b1, 0.05, 120);
  const wq = g.init('w2q', [4, 4, 3, 3], Array.from({ length: 144 }, () => Math.round((r() - 0.5) * 200)), T.INT8);
  const w2 = g.node('DequantizeLinear', [wq, g.init('w2s', [4], uniform(r, 4, 0.002, 0.01)), g.init('w2z', [4], [0, 0, 0, 0], T.INT8)], { axis: 0 }, { name: 'w2_dq' });
  const c2 = g.node('Conv', [a2, w2], { strides: [2, 2], pads: [1, 1, 1, 1] }, { name: 'conv_quant' });
  g.node('BatchNormalization', [c2, g.init('bq_g', [4], uniform(r, 4, 0.5, 1.5)), g.init('bq_b', [4], randn(r, 4, 0.2)),
    g.init('bq_m', [4], randn(r, 4, 0.1)), g.init('bq_v', [4], uniform(r, 4, 0.5, 2))], {}, { name: 'bn_quant', outputs: ['y'] });
  return modelBytes(g, { opset: 13 });
}

describe('fold of a model with QuantizeLinear/DequantizeLinear pairs', () => {
  it('keeps quantized-weights, folds the float layer, and the whole-model check runs', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-qdq-'));
    const src = join(dir, 'qdq.onnx'), out = join(dir, 'qdq-folded.onnx');
    writeFileSync(src, qdqModel());
    const r = foldFile(src, out, {});
    expect(r.normalizations.map((e) => `${e.node}:${e.status}:${e.reason ?? ''}`).sort())
      .toEqual(['bn_float:folded:', 'bn_quant:kept:quantized-weights']);
    expect(r.check!.skipped).toBeNull();
    expect(r.check!.passed).toBe(true);
    expect(r.output).toBe(out);
    // Source: onnxruntime-node on the original and the written model
    const x = randn(rng(8), 3 * 64, 1);
    const a = await runOrt(readFileSync(src), { x: { dims: [1, 3, 8, 8], data: x } });
    const b = await runOrt(readFileSync(out), { x: { dims: [1, 3, 8, 8], data: x } });
    const d = maxDiff(b.y!.data, a.y!.data);
    // a folded float layer can move a value across a rounding step of the next QuantizeLinear: one step of
    // 0.05, times the dequantized conv's largest weight sum, bounds what one flip can do; most values agree
    expect(d.maxAbs).toBeLessThanOrEqual(0.05 * d.scale + 1e-6);
  });
});
