// The SHA-256 a fold records in metadata_props, worked out on a worker thread for a large file, is the digest
// node:crypto gives the whole file at once (the standard's own algorithm, FIPS 180-4, as Node ships it).
import { describe, expect, it } from 'vitest';
import { createHash } from 'node:crypto';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { DIGEST_PLACEHOLDER, fileSha256, fillDigest, sha256Later, sha256sLater, startSha256, stopSha256Ahead } from '../../src/jobs/sha256.js';
import { execFileSync } from 'node:child_process';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { readModelFile } from '../../src/onnx/read.js';
import { writeModelFile } from '../../src/onnx/write.js';
import { foldFile, foldLoaded } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { PROVENANCE_KEYS, provenanceOf, setProvenance } from '../../src/jobs/provenance.js';
import { PleatError } from '../../src/errors.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-sha-'));

describe('file SHA-256', () => {
  it('a 70 MB file hashed on a worker thread, and a small one on this thread, give node:crypto digests', () => {
    for (const size of [70 * 1024 * 1024 + 13, 1234]) {
      const bytes = Buffer.alloc(size);
      for (let i = 0; i < size; i += 4093) bytes[i] = (i * 31) & 255;
      const f = join(dir, `f${size}`);
      writeFileSync(f, bytes);
      const want = createHash('sha256').update(bytes).digest('hex');
      const later = sha256Later(f);
      expect(later()).toBe(want);
      expect(later()).toBe(want);
      expect(fileSha256(f)).toBe(want);
      rmSync(f);
    }
  });

  // coreutils' sha256sum, a digest worked out outside Node
  const sha256sum = (f: string) => execFileSync('sha256sum', [f], { encoding: 'utf8' }).slice(0, 64);
  const seeded = (size: number, seed: number) => {
    const bytes = Buffer.alloc(size);
    for (let i = 0; i < size; i += 4093) bytes[i] = (i * 31 + seed) & 255;
    return bytes;
  };

  it('a hash started ahead of the job is the one the job takes, and gives the digest sha256sum gives', () => {
    for (const [size, seed] of [[70 * 1024 * 1024 + 5, 1], [65 * 1024 * 1024, 2]] as const) {
      const f = join(dir, `ahead${seed}`);
      writeFileSync(f, seeded(size, seed));
      startSha256(f);
      const later = sha256Later(f);
      expect(sha256Later(f)).toBe(later); // taken over, not started again
      expect(later()).toBe(sha256sum(f));
      rmSync(f);
    }
  });

  it('a file changed after its hash was started is hashed again: the digest is of the bytes the job reads', () => {
    const f = join(dir, 'changed');
    const size = 66 * 1024 * 1024;
    writeFileSync(f, seeded(size, 5));
    startSha256(f);
    writeFileSync(f, seeded(size, 6)); // the same size: only the times tell the versions apart
    const later = sha256Later(f);
    expect(later()).toBe(sha256sum(f));
    expect(later()).toBe(createHash('sha256').update(seeded(size, 6)).digest('hex'));
    rmSync(f);
  });

  it('digests dropped ahead are not taken, and a stopped digest asked for after all is still right', () => {
    const f = join(dir, 'dropped');
    writeFileSync(f, seeded(67 * 1024 * 1024, 7));
    startSha256(f);
    const early = sha256Later(f);
    stopSha256Ahead();
    const later = sha256Later(f);
    expect(later).not.toBe(early); // started again
    expect(later()).toBe(sha256sum(f));
    expect(early()).toBe(sha256sum(f)); // its thread stopped: worked out here instead
    const stopped = sha256Later(f);
    stopped.stop();
    expect(stopped()).toBe(sha256sum(f));
    rmSync(f);
  });

  it('a worker that never starts, or is stopped while hashing, leaves the digest to this thread instead of a wait forever', () => {
    const f = join(dir, 'nostart');
    writeFileSync(f, seeded(65 * 1024 * 1024, 9));
    const want = sha256sum(f);
    const never = sha256Later(f, 'this is not JavaScript (');
    expect(never.ready()).toBe(false);
    expect(never()).toBe(want); // after the start limit (5 s), worked out here
    const stopped = sha256Later(f);
    const pause = new Int32Array(new SharedArrayBuffer(4));
    Atomics.wait(pause, 0, 0, 300); // the worker is hashing by now
    stopped.stop();
    expect(stopped()).toBe(want);
    rmSync(f);
  }, 60_000);

  it('a small or missing file starts nothing ahead: it is hashed (or reported) when asked for', () => {
    const small = join(dir, 'small');
    writeFileSync(small, seeded(5000, 3));
    startSha256(small);
    expect(sha256Later(small)()).toBe(sha256sum(small));
    const missing = join(dir, 'missing-ahead.onnx');
    startSha256(missing);
    expect(() => sha256Later(missing)()).toThrow(/missing-ahead\.onnx: cannot read/);
    rmSync(small);
  });

  it('files large in all are hashed one after the other on one thread, each digest the one sha256sum gives, in order', () => {
    // two files of 40 MiB: each below the size hashed on a thread, together past it (a model's side files)
    const files = [11, 12, 13].map((seed, i) => {
      const f = join(dir, `side${seed}`);
      writeFileSync(f, seeded(i === 2 ? 100 : 40 * 1024 * 1024, seed));
      return f;
    });
    const want = files.map(sha256sum);
    expect(sha256sLater(files)()).toEqual(want);
    const small = sha256sLater(files.slice(2));
    expect(small.ready()).toBe(true); // small: hashed here, when asked for
    expect(small()).toEqual(want.slice(2));
    const never = sha256sLater(files, 'this is not JavaScript (');
    expect(never.ready()).toBe(false); // large in all: given to a thread (here, one that never starts)
    expect(never()).toEqual(want); // after the start limit (5 s), worked out here
    for (const f of files) rmSync(f);
  }, 60_000);

  it('a missing file is a bad-input error naming it', () => {
    const f = join(dir, 'missing.onnx');
    expect(() => sha256Later(f)()).toThrow(PleatError);
    expect(() => fileSha256(f)).toThrow(/missing\.onnx: cannot read/);
  });

  it('a placeholder entry written over with the digest gives the bytes the digest written at once gives', () => {
    const entry = (v: string) => Buffer.concat([Buffer.from([0x0a, 19]), Buffer.from('pleat.source.sha256'), Buffer.from([0x12, 64]), Buffer.from(v)]);
    const digest = 'ab'.repeat(32);
    const head = Buffer.alloc(3 * 1024 * 1024, 7); // the entry sits near the end of a file of a few MiB
    const f = join(dir, 'placeholder.bin');
    writeFileSync(f, Buffer.concat([head, entry(DIGEST_PLACEHOLDER), Buffer.from([1, 2, 3])]));
    expect(fillDigest(f, 'pleat.source.sha256', digest)).toBe(true);
    expect(readFileSync(f).equals(Buffer.concat([head, entry(digest), Buffer.from([1, 2, 3])]))).toBe(true);
    // not found, or found twice: nothing is changed and the caller writes the file again
    for (const body of [Buffer.concat([entry(digest), head]), Buffer.concat([entry(DIGEST_PLACEHOLDER), entry(DIGEST_PLACEHOLDER)]), Buffer.concat([entry(DIGEST_PLACEHOLDER), head])]) {
      writeFileSync(f, body);
      expect(fillDigest(f, 'pleat.source.sha256', digest)).toBe(false);
      expect(readFileSync(f).equals(body)).toBe(true);
    }
    rmSync(f);
  });

  it('the placeholder is found wherever it lies in the last MiB (across the seams of the pieces read), once or not at all', () => {
    const key = 'pleat.source.sha256', digest = 'cd'.repeat(32);
    const entry = (v: string) => Buffer.concat([Buffer.from([0x0a, 19]), Buffer.from(key), Buffer.from([0x12, 64]), Buffer.from(v)]);
    const placeholder = entry(DIGEST_PLACEHOLDER);
    // what the rule says, written out once over the whole tail: exactly one occurrence in the last MiB is filled
    const expected = (body: Buffer): Buffer | undefined => {
      const start = Math.max(0, body.length - (1 << 20)), tail = body.subarray(start);
      const at = tail.indexOf(placeholder);
      if (at < 0 || tail.indexOf(placeholder, at + 1) >= 0) return undefined;
      const out = Buffer.from(body);
      out.write(digest, start + at + placeholder.length - 64, 'latin1');
      return out;
    };
    const r = rng(61);
    const f = join(dir, 'seams.bin');
    for (let trial = 0; trial < 40; trial++) {
      const size = (1 << 20) + Math.floor(r() * (1 << 20)) - (trial % 4 === 0 ? 900_000 : 0);
      const body = Buffer.alloc(size, 0x3f); // '?' all around, as weights' high bytes often are
      const places = trial % 5 === 4 ? 2 : trial % 7 === 6 ? 0 : 1;
      for (let p = 0; p < places; p++) {
        // near a 64 KiB seam counted from the end, or anywhere in the last ~1.1 MiB
        const fromEnd = trial % 2 === 0 ? 65536 * (1 + Math.floor(r() * 15)) + Math.floor(r() * 180) - 90 : Math.floor(r() * 1.1 * (1 << 20));
        const at = Math.max(0, Math.min(size - placeholder.length, size - fromEnd));
        placeholder.copy(body, at);
      }
      writeFileSync(f, body);
      const want = expected(body);
      expect(fillDigest(f, key, digest), `trial ${trial}`).toBe(want !== undefined);
      expect(readFileSync(f).equals(want ?? body), `trial ${trial}`).toBe(true);
    }
    rmSync(f);
  });

  it('a fold of a model large enough to be hashed beside the work records the digest node:crypto gives', () => {
    // one 1024-channel 4x4 Conv: 64 MiB of float32 weight, past the size hashed on a worker thread
    const r = rng(3);
    const g = new GraphBuilder();
    g.input('x', [1, 1024, 4, 4]).output('y');
    const w = g.init('w', [1024, 1024, 4, 4], Float32Array.from({ length: 1024 * 1024 * 16 }, (_, i) => ((i * 7919) % 2001 - 1000) * 2e-5));
    const c = g.node('Conv', ['x', w], {}, { name: 'conv' });
    const p = (n: string, v: Float32Array) => g.init(n, [1024], v);
    g.node('BatchNormalization', [c, p('s', uniform(r, 1024, 0.5, 1.5)), p('b', randn(r, 1024, 0.2)), p('m', randn(r, 1024, 0.3)), p('v', uniform(r, 1024, 0.3, 2))], {}, { name: 'bn', outputs: ['y'] });
    const src = join(dir, 'large.onnx');
    const bytes = modelBytes(g);
    writeFileSync(src, bytes);
    foldFile(src, join(dir, 'late.onnx'), { noProofs: true });
    const m = readModelFile(src);
    foldLoaded(m, undefined, src, { noProofs: true }, false);
    const want = createHash('sha256').update(bytes).digest('hex');
    setProvenance(m, provenanceOf(want, undefined, { noProofs: true }, 'not-run'));
    writeModelFile(m, join(dir, 'early.onnx'));
    const late = readFileSync(join(dir, 'late.onnx'));
    expect(late.equals(readFileSync(join(dir, 'early.onnx')))).toBe(true);
    expect(readModelFile(join(dir, 'late.onnx')).metadata.find(([k]) => k === PROVENANCE_KEYS[1])?.[1]).toBe(want);
    rmSync(dir, { recursive: true, force: true });
  }, 120_000);
});
