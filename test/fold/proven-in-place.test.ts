// A proven fold proves each fold on a scaled copy of the weight, then drops the copy and scales the weight
// where it lies, as an unproven fold does. So proven and unproven folds of a model write identical bytes, and a
// proven fold keeps no folded weight in memory: weights still on disk stay pending (src/onnx/sparse-read.ts).
// The written model is checked against the original in onnxruntime-node (graph optimizations disabled).
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { readModelFile } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { foldFile, foldLoaded } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { readWholeUpTo, isOnDisk } from '../../src/onnx/sparse-read.js';

function convBnModel(dir: string, seed: number, channels: number): string {
  const r = rng(seed);
  const g = new GraphBuilder();
  g.input('x', [1, channels, 5, 5]).output('y');
  let h = 'x';
  for (let k = 0; k < 3; k++) {
    const w = g.init(`w${k}`, [channels, channels, 3, 3], randn(r, channels * channels * 9, 0.08));
    const c = g.node('Conv', [h, w], { pads: [1, 1, 1, 1] }, { name: `conv${k}` });
    const p = (n: string, v: Float32Array) => g.init(`${n}${k}`, [channels], v);
    const bn = g.node('BatchNormalization', [c, p('s', uniform(r, channels, 0.5, 1.5)), p('b', randn(r, channels, 0.2)), p('m', randn(r, channels, 0.3)), p('v', uniform(r, channels, 0.01, 2))], { epsilon: f(1e-5) }, { name: `bn${k}` });
    h = g.node('Relu', [bn], {}, { name: `relu${k}`, outputs: k === 2 ? ['y'] : undefined });
  }
  const path = join(dir, `m${seed}.onnx`);
  writeFileSync(path, modelBytes(g));
  return path;
}

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('proven folds scale weights where they lie', () => {
  const dir = mkdtempSync(join(tmpdir(), 'pleat-proven-'));
  // 8 channels: weights in memory; 96 channels: 324 KiB weights, left on disk by the reader
  for (const [seed, channels] of [[1, 8], [2, 96], [3, 96]] as const) {
    it(`seed ${seed}, ${channels} channels: proven and unproven folds write identical bytes, every BN folded, and onnxruntime agrees`, async () => {
      const src = convBnModel(dir, seed, channels);
      const proven = foldFile(src, join(dir, `p${seed}.onnx`), { dims: {} });
      foldFile(src, join(dir, `u${seed}.onnx`), { noProofs: true });
      expect(proven.normalizations.map((n) => n.status)).toEqual(['folded', 'folded', 'folded']);
      expect(proven.check?.passed).toBe(true);
      // identical but for the provenance entry saying whether the check ran (metadata_props)
      const statusAs = (file: string) => {
        const m = readModelFile(join(dir, file));
        m.metadata = m.metadata.map(([k, v]) => [k, k === 'pleat.check.status' ? 'x' : v]);
        return Buffer.from(serializeModel(m));
      };
      expect(Buffer.compare(statusAs(`p${seed}.onnx`), statusAs(`u${seed}.onnx`))).toBe(0);
      const r = rng(seed + 100);
      const x = randn(r, channels * 25, 1);
      const a = await runOrt(src, { x: { dims: [1, channels, 5, 5], data: x } });
      const b = await runOrt(join(dir, `p${seed}.onnx`), { x: { dims: [1, channels, 5, 5], data: x } });
      const d = maxDiff(a.y!.data, b.y!.data);
      expect(d.scale).toBeGreaterThan(0.1);
      expect(d.maxAbs).toBeLessThan(1e-4 * d.scale);
    });
  }

  it('after a proven fold in memory, weights still on disk stay there (nothing decoded is kept)', () => {
    const src = convBnModel(dir, 4, 96);
    const model = readModelFile(src), original = readModelFile(src);
    const big = () => model.graph.initializers.filter((t) => t.dims.length === 4);
    expect(big().every((t) => t.storage.kind === 'raw' && isOnDisk(t.storage.bytes))).toBe(true);
    const report = foldLoaded(model, original, src, {}, true);
    expect(report.normalizations.every((n) => n.status === 'folded')).toBe(true);
    expect(report.check?.passed).toBe(true);
    // the scaling is deferred on the pending bytes: proofs, the check and the quantization report read them without loading
    expect(big().every((t) => t.storage.kind === 'raw' && isOnDisk(t.storage.bytes))).toBe(true);
    expect(original.graph.initializers.filter((t) => t.dims.length === 4).every((t) => t.storage.kind === 'raw' && isOnDisk(t.storage.bytes))).toBe(true);
  });
});
