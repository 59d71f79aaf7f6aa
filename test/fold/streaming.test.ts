// Folding a model whose large weights are still on disk (sparse reading): the channel scaling is deferred and
// applied as the writer streams the weights out, or when something reads them first. Either way the written
// model must compute what the original does (onnxruntime-node, graph optimizations disabled).
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { readModelFile } from '../../src/onnx/read.js';
import { serializeModel, writeModelFile } from '../../src/onnx/write.js';
import { foldModel } from '../../src/fold/index.js';
import { tensorToFloat64 } from '../../src/onnx/tensor.js';
import { lazySourceOf } from '../../src/onnx/sparse-read.js';

function bigModel(dir: string): string {
  const r = rng(77);
  const g = new GraphBuilder();
  g.input('x', [1, 96, 6, 6]).output('y');
  let h = 'x';
  for (let k = 0; k < 2; k++) {
    // 96*96*3*3 float32 = 332 KiB per weight: large enough to stay on disk when read
    const w = g.init(`w${k}`, [96, 96, 3, 3], randn(r, 96 * 96 * 9, 0.05));
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
});
