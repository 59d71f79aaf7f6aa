// Whether two paths name one file: compared by real path (symlinks followed) and, for files that exist, by
// device and inode (hard links), so no spelling, link or relative path slips past a guard.
import { realpathSync, statSync } from 'node:fs';
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
