// Whether two paths name one file: compared by real path (symlinks followed) and, for files that exist, by
// device and inode (hard links), so no spelling, link or relative path slips past a guard.
import { realpathSync, statSync, type Stats } from 'node:fs';
import { basename, dirname, join, resolve } from 'node:path';
import { PleatError } from '../errors.js';

/** Why a path cannot be followed, in words (a loop of symbolic links, a file where a folder should be, ...). */
export function pathProblem(e: unknown): string {
  const code = (e as NodeJS.ErrnoException).code;
  if (code === 'ELOOP') return 'a loop of symbolic links (ELOOP)';
  if (code === 'ENOTDIR') return 'a part of the path is a file, not a folder (ENOTDIR)';
  if (code === 'ENAMETOOLONG') return 'the path is too long (ENAMETOOLONG)';
  return `cannot be reached (${code ?? String(e)})`;
}

/**
 * What is at a path (symlinks followed), undefined when nothing is; a path that cannot be followed (a link loop,
 * a file where a folder should be) is bad input naming `label` (statSync throws for those even when asked not to).
 */
export function entryAt(path: string, label: string): Stats | undefined {
  try {
    return statSync(path, { throwIfNoEntry: false });
  } catch (e) {
    throw new PleatError('bad-input', `${label}: ${pathProblem(e)}`);
  }
}

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
  let st: Stats | undefined;
  try { st = statSync(full, { throwIfNoEntry: false }); } catch { /* a path that cannot be followed: its real path is the key */ }
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
