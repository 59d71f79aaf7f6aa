// --store float16: linear layers' weights kept in half precision (cast back to float32 where read), proven
// with the half-precision gate; the stored model checked against onnxruntime-node running the float32 original.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { readModelFile } from '../../src/onnx/read.js';
import { ROOT } from '../helpers/cli.js';

describe('fold --store float16', () => {
  it('halves the weight bytes of the tray-edge demo and agrees with the float32 original in onnxruntime-node', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-f16-'));
    const src = join(ROOT, 'models', 'tray-edge.onnx');
    const out = join(dir, 'half.onnx');
    const r = foldFile(src, out, { store: 'float16' });
    expect(r.failed).toBe(false);
    expect(r.storage!.tensorsConverted).toBeGreaterThan(0);
    expect(r.storage!.bytesAfter * 2).toBe(r.storage!.bytesBefore);
    expect(r.check!.gates).toEqual(['maxAbs <= 1e-2 * peak and cosine >= 0.9995']);
    // Source: the ONNX standard's reference checker (Debian python3-onnx)
    if (checkerAvailable()) expect(onnxCheck(out)).toBe('');
    // Source: onnxruntime-node running the float32 original and the half-precision result
    const x = randn(rng(21), 3 * 64 * 64);
    const a = await runOrt(readFileSync(src), { image: { dims: [1, 3, 64, 64], data: x } });
    const b = await runOrt(readFileSync(out), { image: { dims: [1, 3, 64, 64], data: x } });
    const name = Object.keys(a)[0]!;
    const d = maxDiff(b[name]!.data, a[name]!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-2 * d.scale); // the half-precision gate's own bound
    expect(d.maxAbs).toBeGreaterThan(0); // half precision does change the numbers
  });

  it('keeps a tensor that would overflow float16 in float32 and reports it', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-f16o-'));
    const r = rng(4);
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 3]);
    const big = Array.from(randn(r, 12));
    big[5] = 70000; // beyond float16's largest finite value, 65504
    g.init('W1', [4, 3], big);
    g.init('W0', [4, 4], randn(r, 16));
    g.init('s', [4], uniform(r, 4, 0.5, 1.5)); g.init('b', [4], randn(r, 4)); g.init('m', [4], randn(r, 4)); g.init('v', [4], uniform(r, 4, 0.5, 2));
    const h = g.node('MatMul', ['x', 'W0'], {}, { name: 'mm0' });
    const n = g.node('BatchNormalization', [g.node('Unsqueeze', [h], { axes: [2] }, { name: 'u' }), 's', 'b', 'm', 'v'], { epsilon: f(1e-5) }, { name: 'bn' });
    g.node('MatMul', [g.node('Squeeze', [n], { axes: [2] }, { name: 'q' }), 'W1'], {}, { name: 'mm1', outputs: ['y'] });
    const src = join(dir, 'm.onnx');
    writeFileSync(src, modelBytes(g, { opset: 11 }));
    const rep = foldFile(src, join(dir, 'o.onnx'), { store: 'float16' });
    expect(rep.storage!.keptFloat32).toEqual(['W1']);
    const m = readModelFile(join(dir, 'o.onnx'));
    expect(m.graph.initializers.find((t) => t.name === 'W1')!.dataType).toBe(1);
    expect(m.graph.initializers.find((t) => t.name === 'W0.float16')!.dataType).toBe(10);
  });
});
