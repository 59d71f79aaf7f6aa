// SHA-256 of a file, read in chunks so a large model never sits in memory twice.
import { createHash } from 'node:crypto';
import { closeSync, openSync, readSync } from 'node:fs';

export function fileSha256(file: string): string {
  const hash = createHash('sha256');
  const buf = Buffer.allocUnsafe(1 << 20);
  const fd = openSync(file, 'r');
  try {
    for (let n; (n = readSync(fd, buf, 0, buf.length, null)) > 0;) hash.update(buf.subarray(0, n));
  } finally {
    closeSync(fd);
  }
  return hash.digest('hex');
}
