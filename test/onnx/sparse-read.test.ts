// Sparse reading (src/onnx/sparse-read.ts): a graph of many small nodes is read in few, growing reads, and a large
// payload after them is still left on disk.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng } from '../helpers/build.js';
import { readModelFile } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { readWholeUpTo, READ_AHEAD, READ_AHEAD_MAX, lazySourceOf } from '../../src/onnx/sparse-read.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';

// The models here are small; they are read sparsely, as files over the whole-read size are (sparse-read.ts).
let wholeUpTo = 0;
beforeAll(() => { wholeUpTo = readWholeUpTo(0); });
afterAll(() => { readWholeUpTo(wholeUpTo); });

describe('reading ahead over many small messages', () => {
  it('leaves a large weight after 20,000 small nodes on disk (but for at most one read-ahead) and reads it back exactly', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-sparse-'));
    const g = new GraphBuilder();
    g.input('x', [1, 1024]).output('y', [1, 1024]);
    let h = 'x';
    for (let k = 0; k < 20000; k++) h = g.node('Relu', [h], {}, { name: `relu${k}` });
    const w = randn(rng(3), 1024 * 2048); // 8 MiB, written after the nodes
    g.init('w', [1024, 2048], w);
    g.node('MatMul', [h, 'w'], {}, { outputs: ['y'] });
    const bytes = modelBytes(g);
    const src = join(dir, 'many.onnx');
    writeFileSync(src, bytes);

    const m = readModelFile(src);
    const t = m.graph.initializers.find((i) => i.name === 'w')!;
    const source = lazySourceOf((t.storage as { bytes: Uint8Array }).bytes)!;
    expect(source).toBeDefined();
    const pending = source.pending.reduce((a, [s, e]) => a + (e - s), 0);
    expect(pending).toBeGreaterThanOrEqual(w.length * 4 - READ_AHEAD_MAX);
    expect(Array.from(tensorToFloat64(t).subarray(0, 1000))).toEqual(Array.from(w.subarray(0, 1000)));
    expect(Buffer.from(serializeModel(readModelFile(src))).equals(readFileSync(src))).toBe(true);
  });
});

describe('small files read whole', () => {
  it('reads a file up to the whole-read size in one piece (nothing pending), and one over it sparsely', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-whole-'));
    const g = new GraphBuilder();
    g.input('x', [1, 512]).output('y', [1, 256]);
    const w = randn(rng(4), 512 * 256); // 512 KiB: a payload sparse reading leaves on disk
    g.init('w', [512, 256], w);
    g.node('MatMul', ['x', 'w'], {}, { outputs: ['y'] });
    const src = join(dir, 'small.onnx');
    writeFileSync(src, modelBytes(g));
    const size = readFileSync(src).byteLength;
    const weightOf = (limit: number) => {
      const was = readWholeUpTo(limit);
      try {
        const t = readModelFile(src).graph.initializers.find((i) => i.name === 'w')!;
        return { t, source: lazySourceOf((t.storage as { bytes: Uint8Array }).bytes) };
      } finally {
        readWholeUpTo(was);
      }
    };
    const whole = weightOf(size);
    expect(whole.source).toBeUndefined();
    expect(Array.from(tensorToFloat64(whole.t))).toEqual(Array.from(w));
    const sparse = weightOf(size - 1);
    // (but for one read-ahead past the weight's header)
    expect(sparse.source?.pending.reduce((a, [s, e]) => a + (e - s), 0)).toBeGreaterThanOrEqual(w.length * 4 - READ_AHEAD);
    expect(Array.from(tensorToFloat64(sparse.t))).toEqual(Array.from(w));
  });
});
