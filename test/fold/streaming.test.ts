// Folding a model whose large weights are still on disk (sparse reading): the channel scaling is deferred and
// applied as the writer streams the weights out, or when something reads them first. Either way the written
// model must compute what the original does (onnxruntime-node, graph optimizations disabled).
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { readModelFile } from '../../src/onnx/read.js';
import { serializeModel, writeModelFile } from '../../src/onnx/write.js';
import { foldModel } from '../../src/fold/index.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { readWholeUpTo, ensureLoaded, lazySourceOf } from '../../src/onnx/sparse-read.js';
import { foldFile, foldLoaded } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { LateRangeCheckFailed } from '../../src/fold/values.js';
import { provenanceOf, setProvenance, sha256File } from '../../src/jobs/provenance.js';

/** Two 96-channel Conv+BN+Relu blocks; `hugeIn0` puts a weight of w0 near the float32 maximum. */
function bigModel(dir: string, opts: { seed?: number; hugeIn0?: boolean } = {}): string {
  const r = rng(opts.seed ?? 77);
  const g = new GraphBuilder();
  g.input('x', [1, 96, 6, 6]).output('y');
  let h = 'x';
  for (let k = 0; k < 2; k++) {
    // 96*96*3*3 float32 = 332 KiB per weight: large enough to stay on disk when read
    const wv = randn(r, 96 * 96 * 9, 0.05);
    // 3e38 times a channel scale above 1.14 passes the float32 maximum 3.4028e38; scales here range over about
    // 0.35..2.7, so some of channels 20..95 (past the part read ahead with the tensor's header) overflow
    if (k === 0 && opts.hugeIn0) for (let c = 20; c < 96; c++) wv[c * 864] = 3e38;
    const w = g.init(`w${k}`, [96, 96, 3, 3], wv);
    const c = g.node('Conv', [h, w], { pads: [1, 1, 1, 1] }, { name: `conv${k}` });
    const p = (n: string, v: Float32Array) => g.init(`${n}${k}`, [96], v);
    const bn = g.node('BatchNormalization', [c, p('s', uniform(r, 96, 0.5, 1.5)), p('b', randn(r, 96, 0.2)), p('m', randn(r, 96, 0.3)), p('v', uniform(r, 96, 0.3, 2))], { epsilon: f(1e-5) }, { name: `bn${k}` });
    h = g.node('Relu', [bn], {}, { name: `relu${k}`, outputs: k === 1 ? ['y'] : undefined });
  }
  const path = join(dir, 'big.onnx');
  writeFileSync(path, modelBytes(g));
  return path;
}

async function agrees(original: string, folded: Uint8Array): Promise<void> {
  const x = randn(rng(5), 96 * 36);
  const a = await runOrt(readFileSync(original), { x: { dims: [1, 96, 6, 6], data: x } });
  const b = await runOrt(folded, { x: { dims: [1, 96, 6, 6], data: x } });
  const d = maxDiff(b.y!.data, a.y!.data);
  expect(d.maxAbs).toBeLessThanOrEqual(1e-4 * d.scale);
}

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('folding weights that are still on disk', () => {
  it('defers the scaling to the writer and writes a model that agrees with the original', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-stream-'));
    const src = bigModel(dir);
    const m = readModelFile(src);
    const w0 = m.graph.initializers.find((t) => t.name === 'w0')!;
    const source = lazySourceOf((w0.storage as { bytes: Uint8Array }).bytes)!;
    expect(source.pending.length).toBeGreaterThan(0); // the weights were not read
    const { ledger } = foldModel(m); // no prover: weights are changed in place
    expect(ledger.normalizations.map((n) => n.status)).toEqual(['folded', 'folded']);
    expect(source.deferred.length).toBe(2); // both scalings wait for the writer
    writeModelFile(m, join(dir, 'out.onnx'));
    await agrees(src, readFileSync(join(dir, 'out.onnx')));
  });

  it('streams a deferred scaling through the kernel\'s memory to the bytes of the scaling done in memory', () => {
    for (const seed of [11, 12]) {
      const dir = mkdtempSync(join(tmpdir(), 'pleat-stream-mem-'));
      const src = bigModel(dir, { seed });
      const streamed = readModelFile(src);
      foldModel(streamed);
      writeModelFile(streamed, join(dir, 'streamed.onnx'));
      const inMemory = readModelFile(src);
      for (const t of inMemory.graph.initializers) ensureLoaded((t.storage as { bytes: Uint8Array }).bytes); // every weight read before the fold
      foldModel(inMemory);
      expect(lazySourceOf((inMemory.graph.initializers.find((t) => t.name === 'w0')!.storage as { bytes: Uint8Array }).bytes)?.pending ?? []).toEqual([]);
      expect(readFileSync(join(dir, 'streamed.onnx')).equals(Buffer.from(serializeModel(inMemory)))).toBe(true);
    }
  });

  it('applies a deferred scaling when the weight is read before writing, exactly once', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-stream2-'));
    const src = bigModel(dir);
    const m = readModelFile(src);
    const before = tensorToFloat64(readModelFile(src).graph.initializers.find((t) => t.name === 'w1')!);
    foldModel(m);
    const w1 = m.graph.initializers.find((t) => t.name === 'w1')!;
    const after = tensorToFloat64(w1); // materializes the deferred change
    expect(after).not.toEqual(before);
    expect(tensorToFloat64(w1)).toEqual(after); // a second read does not scale again
    const bytes = serializeModel(m);
    await agrees(src, bytes);
    writeModelFile(m, join(dir, 'out.onnx'));
    expect(Buffer.from(readFileSync(join(dir, 'out.onnx'))).equals(Buffer.from(bytes))).toBe(true);
  });

  // The fold job lets the storage range check of weights still on disk ride on their scaling (one read of the
  // weights instead of two); these show it decides exactly what the up-front check decides.
  it('a range check left to the scaling gives the same bytes as the check made up front', () => {
    for (const seed of [3, 4, 5]) {
      const dir = mkdtempSync(join(tmpdir(), 'pleat-late-'));
      const src = bigModel(dir, { seed });
      const late = foldFile(src, join(dir, 'late.onnx'), { noProofs: true });
      const m = readModelFile(src);
      foldLoaded(m, undefined, src, { noProofs: true }, false);
      setProvenance(m, provenanceOf(sha256File(src), undefined, { noProofs: true }, 'not-run')); // as the fold job stamps it
      writeModelFile(m, join(dir, 'early.onnx'));
      expect(late.normalizations.map((n) => n.status)).toEqual(['folded', 'folded']);
      expect(readFileSync(join(dir, 'late.onnx')).equals(readFileSync(join(dir, 'early.onnx')))).toBe(true);
    }
  });

  it('a weight that overflows float32 only once scaled is found while writing, and the fold job starts again', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-late-over-'));
    const src = bigModel(dir, { hugeIn0: true });
    // the scaling itself finds the overflow (the writer streams w0 through it) and nothing is left behind
    const m = readModelFile(src);
    foldLoaded(m, undefined, src, { noProofs: true }, true);
    expect(() => writeModelFile(m, join(dir, 'half.onnx'))).toThrow(LateRangeCheckFailed);
    expect(readdirSync(dir).sort()).toEqual(['big.onnx']);
    // the job refuses that fold with the usual reason and folds the other block
    const r = foldFile(src, join(dir, 'out.onnx'), { noProofs: true });
    expect(r.normalizations.map((n) => `${n.node}:${n.status}:${n.reason}`)).toEqual(['bn0:kept:storage-overflow', 'bn1:folded:null']);
    const early = readModelFile(src);
    foldLoaded(early, undefined, src, { noProofs: true }, false);
    setProvenance(early, provenanceOf(sha256File(src), undefined, { noProofs: true }, 'not-run'));
    expect(readFileSync(join(dir, 'out.onnx')).equals(Buffer.from(serializeModel(early)))).toBe(true);
    // (no runtime comparison: weights this large overflow inside the original model too)
    const out = readModelFile(join(dir, 'out.onnx'));
    expect(out.graph.nodes.map((n) => n.name)).toEqual(['conv0', 'bn0', 'relu0', 'conv1', 'relu1']);
  });
});
