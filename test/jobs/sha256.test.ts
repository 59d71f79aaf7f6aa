// The SHA-256 a fold records in metadata_props, worked out on a worker thread for a large file, is the digest
// node:crypto gives the whole file at once (the standard's own algorithm, FIPS 180-4, as Node ships it).
import { describe, expect, it } from 'vitest';
import { createHash } from 'node:crypto';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileSha256, sha256Later } from '../../src/jobs/sha256.js';
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

  it('a missing file is a bad-input error naming it', () => {
    const f = join(dir, 'missing.onnx');
    expect(() => sha256Later(f)()).toThrow(PleatError);
    expect(() => fileSha256(f)).toThrow(/missing\.onnx: cannot read/);
  });
});
