// Issue 12 through the built CLI: constant affine steps inside activations are never kept (a hard-swish network
// whose every BatchNormalization folds passes `audit --fail-on kept`), and --clone-shared on fold and audit.
// Outside checks: JSON validated with ajv against the shipped schema; the folded model run by onnxruntime-node
// (graph optimizations off) against the original within 1e-4 of the output scale.
import { describe, expect, it } from 'vitest';

const SLOW = 120_000; // each test starts the CLI a few times; the machine is shared
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { pleat } from '../helpers/cli.js';
import { maxDiff, runOrt } from '../helpers/ort.js';
import { schemaValidator } from '../report/helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-fanout-cli-'));
const save = (name: string, bytes: Uint8Array) => { const p = join(dir, name); writeFileSync(p, bytes); return p; };

function bn(g: GraphBuilder, x: string, c: number, name: string, seed: number): string {
  const r = rng(seed);
  const ps = [uniform(r, c, 0.5, 1.5), randn(r, c, 0.2), randn(r, c, 0.3), uniform(r, c, 0.2, 2)];
  const names = ['scale', 'B', 'mean', 'var'].map((k, i) => g.init(`${name}.${k}`, [c], ps[i]!));
  return g.node('BatchNormalization', [x, ...names], {}, { name });
}

/**
 * A small camera classifier in the style of MobileNetV3: conv -> BN -> hard-swish (x * clip(x + 3, 0, 6) / 6,
 * written out) three times, then a 1x1 head conv with bias and no norm -> hard-swish -> pool -> Gemm.
 */
function hardSwishNet(): Uint8Array {
  const g = new GraphBuilder();
  g.input('image', [1, 3, 8, 8]).output('logits', [1, 5]);
  const three = g.init('three', [], [3]), zero = g.init('zero', [], [0]), six = g.init('six', [], [6]);
  const hswish = (x: string, p: string) => {
    const c = g.node('Clip', [g.node('Add', [x, three], {}, { name: `${p}.add3` }), zero, six], {}, { name: `${p}.clip` });
    return g.node('Div', [g.node('Mul', [x, c], {}, { name: `${p}.mul` }), six], {}, { name: `${p}.div6` });
  };
  let x = 'image', cin = 3, seed = 1;
  for (const [i, cout, k] of [[1, 8, 3], [2, 8, 3], [3, 12, 1]] as const) {
    const w = g.init(`conv${i}.W`, [cout, cin, k, k], randn(rng(seed++), cout * cin * k * k, 0.4));
    const c = g.node('Conv', [x, w], { pads: k > 1 ? [1, 1, 1, 1] : [0, 0, 0, 0] }, { name: `conv${i}` });
    x = hswish(bn(g, c, cout, `bn${i}`, seed++), `act${i}`);
    cin = cout;
  }
  const head = g.node('Conv', [x, g.init('head.W', [16, cin, 1, 1], randn(rng(seed++), 16 * cin, 0.3)), g.init('head.b', [16], randn(rng(seed++), 16, 0.1))], {}, { name: 'head' });
  const pooled = g.node('Flatten', [g.node('GlobalAveragePool', [hswish(head, 'act_head')], {}, { name: 'pool' })], {}, { name: 'flat' });
  g.node('Gemm', [pooled, g.init('fc.W', [16, 5], randn(rng(seed++), 80, 0.3)), g.init('fc.b', [5], randn(rng(seed++), 5, 0.1))], {}, { name: 'fc', outputs: ['logits'] });
  return modelBytes(g, { opset: 13 });
}

describe('constant affine steps are never kept', () => {
  const model = save('hswish.onnx', hardSwishNet());

  it('audit --fail-on kept exits 0 on a hard-swish network whose every BatchNormalization folds', () => {
    const r = pleat(['audit', model, '--fail-on', 'kept', '--json']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(schemaValidator()(j)).toBe(true);
    const norms = j.normalizations.filter((e: { kind: string }) => e.kind === 'normalization');
    expect(norms.map((e: { node: string; status: string }) => `${e.node}:${e.status}`)).toEqual(['bn1:foldable', 'bn2:foldable', 'bn3:foldable']);
    expect([j.foldable, j.kept]).toEqual([3, 0]);
    for (const e of j.normalizations) expect(e.status).not.toBe('kept');
    // the text ledger lists the steps that do fold apart, under their own heading
    const t = pleat(['audit', model]).stdout;
    expect(t).toMatch(/3 foldable, 0 kept/);
  }, SLOW);

  it('fold folds every BatchNormalization, and the result agrees with the original in onnxruntime-node', async () => {
    const out = join(dir, 'hswish.folded.onnx');
    const r = pleat(['fold', model, '-o', out, '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.normalizations.filter((e: { kind: string; status: string }) => e.kind === 'normalization' && e.status === 'folded')).toHaveLength(3);
    expect(j.check.passed).toBe(true);
    const feeds = { image: { dims: [1, 3, 8, 8], data: Float32Array.from(randn(rng(7), 192, 1)) } };
    const want = await runOrt(readFileSync(model), feeds), got = await runOrt(readFileSync(out), feeds);
    const d = maxDiff(got.logits!.data, want.logits!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * Math.max(d.scale, 1e-6));
  }, SLOW);
});

describe('--clone-shared', () => {
  // conv -> bn -> relu, and the conv's output also feeds the residual Add
  const g = new GraphBuilder();
  g.input('x', [1, 4, 5, 5]).output('y', [1, 4, 5, 5]);
  const c = g.node('Conv', ['x', g.init('cw', [4, 4, 3, 3], randn(rng(1), 144, 0.4))], { pads: [1, 1, 1, 1] }, { name: 'conv' });
  g.node('Add', [g.node('Relu', [bn(g, c, 4, 'bn', 2)], {}, { name: 'relu' }), c], {}, { name: 'residual', outputs: ['y'] });
  const model = save('shared.onnx', modelBytes(g));

  it('audit says how to fold it, and with the flag says foldable with the cost', () => {
    const plain = pleat(['audit', model]);
    expect(plain.stdout).toMatch(/kept\s+bn\s+BatchNormalization\s+shared-output: .*'residual' \(Add\).*--clone-shared/);
    const withFlag = pleat(['audit', model, '--clone-shared']);
    expect(withFlag.code).toBe(0);
    expect(withFlag.stdout).toMatch(/foldable\s+bn\s+BatchNormalization\s+into conv .*\+576 bytes/);
    expect(withFlag.stdout).toMatch(/1 layer cloned for --clone-shared \(\+576 B of weights\)/);
  }, SLOW);

  it('fold --clone-shared writes a model onnxruntime-node finds equivalent', async () => {
    const out = join(dir, 'shared.folded.onnx');
    const r = pleat(['fold', model, '-o', out, '--clone-shared', '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.normalizations.map((e: { node: string; status: string; cloneBytes: number }) => [e.node, e.status, e.cloneBytes])).toEqual([['bn', 'folded', 576]]);
    const feeds = { x: { dims: [1, 4, 5, 5], data: Float32Array.from(randn(rng(3), 100, 1)) } };
    const want = await runOrt(readFileSync(model), feeds), got = await runOrt(readFileSync(out), feeds);
    const d = maxDiff(got.y!.data, want.y!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * Math.max(d.scale, 1e-6));
  }, SLOW);
});
