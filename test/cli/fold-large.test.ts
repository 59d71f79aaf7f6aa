// A model large enough for its digest to be worked out on a thread, folded from the command line: the command
// starts that hash as soon as its flags are parsed (src/jobs/sha256.ts startSha256). The recorded digest is the
// one coreutils' sha256sum gives, the bytes are those the library writes, and a large input that is no model
// is still reported in one line with nothing written.
import { describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { pleat } from '../helpers/cli.js';
import { readModelFile } from '../../src/onnx/read.js';
import { foldFile } from '../../src/jobs/fold.js';
import { PROVENANCE_KEYS } from '../../src/jobs/provenance.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-large-'));
const sha256sum = (f: string) => execFileSync('sha256sum', [f], { encoding: 'utf8' }).slice(0, 64);

/** One 1024-channel 4x4 Conv and its BatchNormalization: 64 MiB of float32 weight, past the size hashed on a thread. */
function largeModel(seed: number): Uint8Array {
  const r = rng(seed);
  const g = new GraphBuilder();
  g.input('x', [1, 1024, 4, 4]).output('y');
  const w = g.init('w', [1024, 1024, 4, 4], Float32Array.from({ length: 1024 * 1024 * 16 }, (_, i) => ((i * 7919 + seed) % 2001 - 1000) * 2e-5));
  const c = g.node('Conv', ['x', w], {}, { name: 'conv' });
  const p = (n: string, v: Float32Array) => g.init(n, [1024], v);
  g.node('BatchNormalization', [c, p('s', uniform(r, 1024, 0.5, 1.5)), p('b', randn(r, 1024, 0.2)), p('m', randn(r, 1024, 0.3)), p('v', uniform(r, 1024, 0.3, 2))], {}, { name: 'bn', outputs: ['y'] });
  return modelBytes(g);
}

describe('pleat fold of a large model', () => {
  it('records the digest sha256sum gives and writes the bytes the library writes', () => {
    const src = join(dir, 'large.onnx');
    writeFileSync(src, largeModel(4));
    const r = pleat(['fold', src, '-o', join(dir, 'cli.onnx'), '--unproven', '--quiet']);
    expect(r.code).toBe(0);
    const meta = readModelFile(join(dir, 'cli.onnx')).metadata;
    expect(meta.find(([k]) => k === PROVENANCE_KEYS[1])?.[1]).toBe(sha256sum(src));
    foldFile(src, join(dir, 'lib.onnx'), { noProofs: true });
    expect(readFileSync(join(dir, 'cli.onnx')).equals(readFileSync(join(dir, 'lib.onnx')))).toBe(true);
  }, 120_000);

  it('folds of several large models (a batch: the hash started for the first is dropped) record their own digests', () => {
    const models = [5, 6].map((seed) => { const p = join(dir, `batch${seed}.onnx`); writeFileSync(p, largeModel(seed)); return p; });
    const r = pleat(['fold', ...models, '--out-dir', join(dir, 'batch-out'), '--unproven', '--quiet']);
    expect(r.code).toBe(0);
    for (const m of models) {
      const meta = readModelFile(join(dir, 'batch-out', m.split('/').pop()!)).metadata;
      expect(meta.find(([k]) => k === PROVENANCE_KEYS[1])?.[1]).toBe(sha256sum(m));
    }
  }, 120_000);

  it('a large input that is no model: one line, exit 2, nothing written, the hash thread does not hold the exit', () => {
    const src = join(dir, 'noise.onnx');
    const bytes = Buffer.alloc(70 * 1024 * 1024, 0xff); // a varint that never ends
    writeFileSync(src, bytes);
    const out = join(dir, 'out', 'noise.onnx');
    const r = pleat(['fold', src, '--out-dir', join(dir, 'out')]);
    expect(r.code).toBe(2);
    const lines = r.stderr.trim().split('\n');
    expect(lines).toHaveLength(1);
    expect(lines[0]).toMatch(/^pleat: .*noise\.onnx/);
    expect(existsSync(out)).toBe(false);
    expect(existsSync(join(dir, 'out'))).toBe(false); // no temporary left behind either, nor the folder made for it
    rmSync(dir, { recursive: true, force: true });
  }, 120_000);
});
