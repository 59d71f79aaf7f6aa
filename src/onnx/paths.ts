// Whether two paths name one file: compared by real path (symlinks followed) and, for files that exist, by
// device and inode (hard links), so no spelling, link or relative path slips past a guard.
import { realpathSync, statSync, type Stats } from 'node:fs';
import { basename, dirname, join, resolve } from 'node:path';

/** Keys naming the file a path reaches: its real path, and `dev:ino` when it exists. */
export function fileKeys(path: string): string[] {
  const full = resolve(path);
  const keys: string[] = [];
  try {
    keys.push(realpathSync(full));
  } catch {
    // not there yet: the real folder plus the name
    try { keys.push(join(realpathSync(dirname(full)), basename(full))); } catch { keys.push(full); }
  }
  const st = statSync(full, { throwIfNoEntry: false });
  if (st) keys.push(`${st.dev}:${st.ino}`);
  return keys;
}

export function sameFile(a: string, b: string): boolean {
  const kb = new Set(fileKeys(b));
  return fileKeys(a).some((k) => kb.has(k));
}

/**
 * What an existing entry is when it is not a regular file or a folder ('a device', 'a FIFO', 'a socket'), else
 * undefined. An output is written whole at a temporary name and renamed over its destination: over /dev/null or
 * a FIFO that rename would replace the device or pipe itself with a plain file (as root, for everyone).
 */
export function specialKind(st: Stats | undefined): string | undefined {
  if (!st || st.isFile() || st.isDirectory()) return undefined;
  return st.isCharacterDevice() || st.isBlockDevice() ? 'a device' : st.isFIFO() ? 'a FIFO' : st.isSocket() ? 'a socket' : 'not a regular file';
}
