// Intent records: before pleat creates a temporary file (or a commit record) in a folder, it names it in a record
// of its own in that folder, `.pleat-<pid>-<token>.intent`. A later run removes what a dead run left only when
// such a record names it, so a user's file that merely looks like a pleat temporary (`.pleat-1-a-notes.tmp`, or
// one copied from another machine) is never removed. The record starts with a header line, then one JSON-quoted
// file name a line, appended before each file is made: a run killed while appending leaves a last line without
// its line end, which names nothing made yet and is ignored. A file in any other form (one cut short within its
// header, or empty, included, or one naming something that can be no folder entry) is not a record, and is left
// alone with all it names.
import { appendFileSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { basename, dirname, join } from 'node:path';

/** A pleat temporary: `.pleat-<pid>-<token>-<name>.tmp` (the name may hold a line end: `s`). */
export const TEMP_NAME = /^\.pleat-(\d+)-([0-9a-z]+)-.+\.tmp$/s;
/** A commit record: `.pleat-<pid>-<token>.commit` (see src/jobs/outputs.ts). */
export const COMMIT_NAME = /^\.pleat-(\d+)-([0-9a-z]+)\.commit$/;
/** An intent record: `.pleat-<pid>-<token>.intent`. */
export const INTENT_NAME = /^\.pleat-(\d+)-([0-9a-z]+)\.intent$/;

const HEADER = 'pleat intent record: the files below are made by this run, each named before it is made\n';

/** The longest name of a folder entry (Linux and most file systems: 255 bytes). */
export const NAME_MAX = 255;

/**
 * Whether `name` can be a folder entry: not empty, not . or .., no slash or NUL, at most NAME_MAX bytes. Every name
 * pleat records is one; a record naming anything else was not written by pleat (forged or corrupt), and acting
 * on it could only fail (a NUL byte or an overlong name is an error from the file system calls, not a file).
 */
export function isEntryName(name: string): boolean {
  return name !== '' && name !== '.' && name !== '..' && !/[/\0]/.test(name) && Buffer.byteLength(name) <= NAME_MAX;
}

/** Whether `path` can name a file: a string with no NUL byte whose every part is at most NAME_MAX bytes. */
export function isPathText(path: unknown): path is string {
  return typeof path === 'string' && path !== '' && !path.includes('\0') && path.split('/').every((p) => Buffer.byteLength(p) <= NAME_MAX);
}

/** The intent records of one writer, one per folder it makes files in. */
export class IntentLog {
  private readonly folders = new Set<string>();

  /** `stem` is `.pleat-<pid>-<token>`: the record in each folder is `<stem>.intent`. */
  constructor(readonly stem: string) {}

  recordIn(dir: string): string {
    return join(dir, `${this.stem}.intent`);
  }

  /** Name `path` (a file about to be made) in the record of its folder. Call before making the file. */
  note(path: string): void {
    const dir = dirname(path);
    const line = `${JSON.stringify(basename(path))}\n`;
    // (the first note creates the record, never over an existing file; a failure is the caller's to word, as a
    // failure to write the file itself would be)
    if (this.folders.has(dir)) appendFileSync(this.recordIn(dir), line);
    else writeFileSync(this.recordIn(dir), HEADER + line, { flag: 'wx' });
    this.folders.add(dir);
  }

  /** Remove every record of this log (once what they name is renamed in or removed, or handed to no one). */
  clear(): void {
    for (const dir of this.folders) rmSync(this.recordIn(dir), { force: true });
    this.folders.clear();
  }
}

/** The file names an intent record lists, or undefined when the file is not a record pleat wrote. */
export function readIntent(path: string): string[] | undefined {
  let text: string;
  try { text = readFileSync(path, 'utf8'); } catch { return undefined; }
  // (a file cut short within the header, an empty one among them, is not told apart from a user's file of that
  // name: it is left alone, and names nothing a run made)
  if (!text.startsWith(HEADER)) return undefined;
  const lines = text.slice(HEADER.length).split('\n');
  lines.pop(); // after the last line end: nothing, or a line cut short by a kill (its file was not made yet)
  const names: string[] = [];
  for (const l of lines) {
    let name: unknown;
    try { name = JSON.parse(l); } catch { return undefined; }
    if (typeof name !== 'string' || !isEntryName(name)) return undefined;
    names.push(name);
  }
  return names;
}
