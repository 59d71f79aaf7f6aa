// Issue 11 item 12, --store float16 end to end: weights read only inside If bodies are converted too, a
// weight with another reader is listed with its reason, the Cast nodes count in the ledger's node totals,
// quantization readiness stays, export --store float16 writes half-precision tensors, and compare recognises
// a model whose weights are stored in half precision. Outside checks: onnxruntime-node (graph optimizations
// off) running the float32 original and the stored model; the ONNX reference checker (Debian python3-onnx).
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, T, uniform } from '../helpers/build.js';
import { maxDiff, runOrt } from '../helpers/ort.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';
import { pleat, ROOT } from '../helpers/cli.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { readModelFile } from '../../src/onnx/read.js';
import { surveyModel } from '../../src/jobs/survey.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-f16b-'));

/** Conv(x, W) -> BN in the then branch, Conv(x, W2) in the else branch; W and W2 live in the main graph. */
function ifModel(): Uint8Array {
  const r = rng(31);
  const g = new GraphBuilder('main');
  g.input('x', [1, 3, 5, 5]).output('y', [1, 4, 5, 5]);
  g.init('cond', [], [1], T.BOOL);
  g.init('W', [4, 3, 3, 3], randn(r, 108, 0.3));
  g.init('W2', [4, 3, 1, 1], randn(r, 12, 0.3));
  g.init('S', [4, 3, 1, 1], randn(r, 12)); // read by a Conv and by an Add: not only a weight
  const then = new GraphBuilder('then');
  then.output('t_out', [1, 4, 5, 5]);
  then.init('s', [4], uniform(r, 4, 0.5, 1.5)); then.init('b', [4], randn(r, 4));
  then.init('m', [4], randn(r, 4)); then.init('v', [4], uniform(r, 4, 0.5, 2));
  then.node('Conv', ['x', 'W'], { pads: [1, 1, 1, 1] }, { name: 'conv_t', outputs: ['ct'] });
  then.node('BatchNormalization', ['ct', 's', 'b', 'm', 'v'], {}, { name: 'bn_t', outputs: ['t_out'] });
  const other = new GraphBuilder('else');
  other.output('e_out', [1, 4, 5, 5]);
  other.node('Conv', ['x', 'W2'], {}, { name: 'conv_e', outputs: ['ce'] });
  other.node('Conv', ['x', 'S'], {}, { name: 'conv_s', outputs: ['cs'] });
  other.node('Add', ['ce', 'cs'], {}, { name: 'add_e', outputs: ['e_sum'] });
  other.node('Add', ['e_sum', 'S_flat'], {}, { name: 'add_s', outputs: ['e_out'] });
  g.init('S_shape', [4], [1, 4, 3, 1], T.INT64);
  g.node('Reshape', ['S', 'S_shape'], {}, { name: 'reshape_s', outputs: ['S_r'] });
  g.node('ReduceMean', ['S_r'], { axes: [2] }, { name: 'mean_s', outputs: ['S_flat'] });
  g.node('If', ['cond'], { then_branch: then, else_branch: other }, { name: 'branch', outputs: ['y'] });
  return modelBytes(g, { opset: 17 });
}

function totalNodes(path: string): number {
  return surveyModel(readModelFile(path)).nodeCount;
}

describe('--store float16 end to end', () => {
  it('converts weights read only inside If bodies, lists the one it skips, counts its Cast nodes', async () => {
    const src = join(dir, 'if.onnx');
    writeFileSync(src, ifModel());
    const out = join(dir, 'if.f16.onnx');
    const r = foldFile(src, out, { store: 'float16' });
    expect(r.failed).toBe(false);
    expect(r.normalizations.map((e) => `${e.node}:${e.status}`)).toEqual(['bn_t:folded']);
    const m = readModelFile(out);
    const types = new Map(m.graph.initializers.map((t) => [t.name, t.dataType]));
    expect(types.get('W.float16')).toBe(T.FLOAT16);
    expect(types.get('W2.float16')).toBe(T.FLOAT16);
    expect(types.get('S')).toBe(T.FLOAT);
    expect(r.storage!.skipped).toEqual([{ tensor: 'S', reason: "also read by Reshape 'reshape_s', which is not a linear layer's weight slot" }]);
    expect(r.storage!.castNodes).toBe(r.storage!.tensorsConverted);
    // the ledger's node total is the written model's node count, Cast nodes included
    expect(r.nodesAfter).toBe(totalNodes(out));
    expect(pleat(['fold', src, '-o', join(dir, 'if.f16.cli.onnx'), '--store', 'float16']).stdout).toMatch(/kept float32: S \(also read by Reshape 'reshape_s'/);
    // Source: the ONNX standard's reference checker (Debian python3-onnx)
    if (checkerAvailable()) expect(onnxCheck(out)).toBe('');
    // Source: onnxruntime-node, float32 original against the half-precision model
    const x = randn(rng(8), 75);
    const a = await runOrt(readFileSync(src), { x: { dims: [1, 3, 5, 5], data: x } });
    const b = await runOrt(readFileSync(out), { x: { dims: [1, 3, 5, 5], data: x } });
    const d = maxDiff(b.y!.data, a.y!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-2 * d.scale); // the float16 gate's bound
    expect(d.maxAbs).toBeGreaterThan(0); // the weights were rounded to half precision
  });

  it('keeps the quantization-readiness section and counts the Cast nodes on the demo model', () => {
    const out = join(dir, 'edge.f16.onnx');
    const r = foldFile(join(ROOT, 'models', 'tray-edge.onnx'), out, { store: 'float16' });
    expect(r.quantization.length).toBeGreaterThan(0);
    expect(r.nodesAfter).toBe(totalNodes(out));
  });

  it('export --store float16 writes half-precision tensors', () => {
    const bundle = join(dir, 'bundle');
    const r = pleat(['export', join(ROOT, 'models', 'tray-edge.onnx'), '--bundle', bundle, '--store', 'float16', '--json']);
    expect(r.code, r.stderr).toBe(0);
    const manifest = JSON.parse(readFileSync(join(bundle, 'manifest.json'), 'utf8'));
    const dtypes = Object.values(manifest.tensors as Record<string, { safetensors_dtype: string }>).map((t) => t.safetensors_dtype);
    expect(dtypes).toContain('F16');
    expect(JSON.parse(r.stdout).fold.storage.tensorsConverted).toBeGreaterThan(0);
  });

  it('compare ORIGINAL FOLDED_F16 applies the float16 gate and says so', () => {
    const src = join(ROOT, 'models', 'tray-edge.onnx');
    const out = join(dir, 'edge.f16.cmp.onnx');
    expect(pleat(['fold', src, '-o', out, '--store', 'float16']).code).toBe(0);
    const r = pleat(['compare', src, out]);
    expect(r.code, r.stdout).toBe(0);
    expect(r.stdout).toMatch(/model B stores 10 weights in half precision .*float16 gate/);
    expect(r.stdout).toMatch(/gate \(default\): maxAbs <= 1e-2 \* peak and cosine >= 0\.9995/);
    const j = JSON.parse(pleat(['compare', src, out, '--json']).stdout);
    expect(j.halfPrecisionWeights).toEqual({ a: 0, b: 10 });
  });
});
