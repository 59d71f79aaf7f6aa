// The output transaction: every file a command writes (folded model, its side file, reports, bundle files) goes
// through one OutputSet. First every destination is decided and checked (its folder exists and is writable, it
// is no input, no other output, no file pleat was not asked to write); then each file is written to a temporary
// name in its own folder; then, once everything is staged (and the staged model read back and checked), all are
// renamed in. A failure on any path removes the temporaries.
//
// Temporary names are pleat's: `.pleat-<pid>-<token>-<name>.tmp`. Before a temporary is made, an intent record
// in its folder, `.pleat-<pid>-<token>.intent`, names it (src/onnx/intent.ts). Before the renames a commit record
// `.pleat-<pid>-<token>.commit` lists them, and it is removed after the last one, then the intent records. A run
// killed before the commit record leaves temporaries its intent records name, which the next run writing to
// that folder removes (their process is gone); a run killed during the renames leaves the commit record, and the
// next run finishes those renames first, so the files written together end up together. A file no record names
// is never removed, however it is named: it may be the user's.
import { accessSync, constants, lstatSync, mkdirSync, readdirSync, readFileSync, renameSync, rmSync, statSync, writeFileSync } from 'node:fs';
import { randomBytes } from 'node:crypto';
import { isMainThread } from 'node:worker_threads';
import { basename, dirname, join, relative, resolve } from 'node:path';
import { PleatError } from '../errors.js';
import { entryAt, fileKeys, specialKind } from '../onnx/paths.js';
import { COMMIT_NAME, INTENT_NAME, IntentLog, isPathText, NAME_MAX, readIntent, TEMP_NAME } from '../onnx/intent.js';
import { ownsSideFile } from '../onnx/side-owner.js';
import type { StagedFile } from '../onnx/write.js';

export type { StagedFile };

/** Test hook: PLEAT_KILL_AT=<point> kills the process at that point of a commit (the SIGKILL test). */
function killPoint(point: string): void {
  if (process.env.PLEAT_KILL_AT === point) process.kill(process.pid, 'SIGKILL');
}

/**
 * What every transaction of this process starts its token with (its worker threads are given it, see
 * workerOutputEnv). A process number alone does not tell runs apart: in containers every job's pleat may be
 * process 2, and a run once took another container's live temporaries in a shared folder for its own and removed
 * them. (Made anew in each process's main thread, never taken from a parent's environment.)
 */
const PROCESS_TAG = (!isMainThread && process.env.PLEAT_OUTPUT_TAG) || randomBytes(4).toString('hex');

/** The environment for a worker thread whose outputs belong to this process (it takes the process's tag). */
export function workerOutputEnv(): NodeJS.ProcessEnv {
  return { ...process.env, PLEAT_OUTPUT_TAG: PROCESS_TAG };
}

/**
 * A commit record older than this has no live writer: a run writes its record right before its renames and
 * removes it right after (milliseconds). Past it, a record is carried out whatever its process number says (the
 * number may be another container's, or reused), where before it could stay unfinished for good.
 */
const RECORD_STALE_MS = 60_000;

function alive(pid: number): boolean {
  if (pid === process.pid) return true;
  try {
    process.kill(pid, 0);
    return true;
  } catch (e) {
    return (e as NodeJS.ErrnoException).code === 'EPERM';
  }
}

/**
 * Finish or clear what a killed pleat run left in `dir`: commit records of dead processes are carried out (their
 * files were complete and checked), then what the intent records of dead processes name is removed. Live runs'
 * files are left alone, and so is every file no record names, whatever its name.
 *
 * A record is carried out only as pleat writes one: kept in the folder of its first file, listing that run's own
 * temporaries (same process), each beside the name it carries, and named in its run's intent record beside it (a
 * file no intent record names is left alone, whatever it holds). A record in pleat's form copied elsewhere (a
 * folder copied whole) is dropped, not carried out. `inputOf` names the files the current run
 * reads: a record that would replace one of them is refused, loudly, rather than swapping the input under the run.
 */
export function recoverFolder(dir: string, inputOf: (path: string) => string | undefined = () => undefined): void {
  let names: string[];
  try { names = readdirSync(dir); } catch { return; }
  for (const n of names) {
    const m = COMMIT_NAME.exec(n);
    if (!m) continue;
    const pid = Number(m[1]);
    // ours (this process's) or a live writer's, unless it is old enough that no writer can be behind it
    if (pid === process.pid && m[2]!.startsWith(PROCESS_TAG)) continue;
    if (alive(pid) && !staleRecord(join(dir, n))) continue; // (alive: any record of this process number)
    const list = commitRecordOf(dir, n, m[1]!, m[2]!);
    if (!list) continue;
    const ours = list.length > 0 && resolve(dirname(list[0]!.dest)) === resolve(dir) && list.every((f) => {
      const t = TEMP_NAME.exec(basename(f.tmp));
      return t !== null && t[1] === m[1] && dirname(resolve(f.tmp)) === dirname(resolve(f.dest))
        && basename(f.tmp).endsWith(`-${basename(f.dest)}.tmp`);
    });
    if (ours) {
      const pending = list.filter((f) => statSync(f.tmp, { throwIfNoEntry: false }));
      for (const f of pending) {
        const input = inputOf(f.dest);
        if (input) {
          throw new PleatError('bad-input', `${join(dir, n)}: a killed pleat run (process ${m[1]}) left this unfinished commit, which would replace the ${input}; remove the record to drop that commit, or run again reading another file`);
        }
      }
      // what was put at a destination since the kill (a folder where a file goes, a folder that is not empty where a
      // folder goes) is not replaced: refused, loudly, as the rename would fail there (a bare internal error before)
      const left = (f: StagedFile, why: string) => new PleatError('bad-input', `${join(dir, n)}: a killed pleat run (process ${m[1]}) left this unfinished commit, and ${f.dest} ${why}; move that away, or remove the record to drop that commit`);
      for (const f of pending) {
        const here = lstatSync(f.dest, { throwIfNoEntry: false });
        if (!here) continue;
        const folder = statSync(f.tmp).isDirectory();
        if (folder && !here.isDirectory()) throw left(f, 'is now a file, where its folder goes');
        if (folder && readdirSync(f.dest).length > 0) throw left(f, 'is now a folder that is not empty, where its folder goes');
        if (!folder && here.isDirectory()) throw left(f, 'is now a folder, where its file goes');
      }
      for (const f of pending) {
        try { renameSync(f.tmp, f.dest); } catch (e) { throw left(f, `cannot be written (${(e as NodeJS.ErrnoException).code ?? String(e)})`); }
      }
    }
    // the temporaries it lists in this folder that were not renamed in (a dropped record's) go with it
    let cleared = true;
    for (const f of list) if (dirname(resolve(f.tmp)) === resolve(dir) && removeLeft(dir, basename(f.tmp), TEMP_NAME) === false) cleared = false;
    if (cleared) removeQuietly(join(dir, n));
  }
  // what dead runs named before making it; a record of this process's number is never taken for a dead run's
  // (another container's run may carry that number: its files stay)
  for (const n of readdirSync(dir)) {
    const m = INTENT_NAME.exec(n);
    if (!m || alive(Number(m[1]))) continue;
    const listed = readIntent(join(dir, n));
    if (!listed) continue; // not in pleat's form: not ours to remove
    // (a record stays while a file it names does: the next run tries again)
    let cleared = true;
    for (const name of listed) if ((removeLeft(dir, name, TEMP_NAME) ?? removeLeft(dir, name, COMMIT_NAME)) === false) cleared = false;
    if (cleared) removeQuietly(join(dir, n));
  }
}

/**
 * The entries of a dead run's commit record `name` in `dir` when it is pleat's, else undefined. pleat names its
 * commit record in its intent record before writing it: when an intent record of that run is beside it, the
 * record is pleat's only when that names it (a user's `[]` under that name is theirs). With no intent record there,
 * it may be a record of a pleat from before intent records: carried out, as such a pleat would, only when it is
 * byte for byte what that pleat wrote (oldCommitRecord); anything else is left alone and named once in a notice.
 */
function commitRecordOf(dir: string, name: string, pid: string, token: string): StagedFile[] | undefined {
  const intent = join(dir, name.replace(/\.commit$/, '.intent'));
  if (lstatSync(intent, { throwIfNoEntry: false })) {
    if (!readIntent(intent)?.includes(name)) return undefined;
    return readCommitRecord(join(dir, name)); // (not in pleat's form: one cut short by a kill, which its intent record names)
  }
  const old = oldCommitRecord(dir, name, pid, token);
  if (!old) notice(join(dir, name), `${join(dir, name)}: named like a pleat commit record, but no intent record names it and it is not in the exact form of a record from a pleat before intent records; left alone (remove it if it is not yours)`);
  return old;
}

/** The token of a transaction of a pleat from before intent records: 10 hex digits, or 14 (its process tag first). */
const OLD_TOKEN = /^(?:[0-9a-f]{10}|[0-9a-f]{14})$/;
/** Such a pleat's temporary name up to its destination's name: `.pleat-<pid>-<token><counter>`. */
const OLD_TEMP_HEAD = /^\.pleat-(\d+)-[0-9a-f]{10}(?:[0-9a-f]{4})?[0-9]+$/;

/**
 * The entries of a commit record written by a pleat from before intent records (before 2026-12-03's bd21e0d), or
 * undefined when the file is not exactly one. Such a pleat wrote JSON.stringify of its staged files: a non-empty
 * array of {"tmp", "dest"} or {"tmp", "dest", "folder": true}, keys in that order, no space; every path absolute
 * and normal, each temporary beside its destination and named `.pleat-<pid>-<token><counter>-<dest name>.tmp` with
 * the record's own process number, no destination twice, and the record in the folder of the first destination.
 */
function oldCommitRecord(dir: string, name: string, pid: string, token: string): StagedFile[] | undefined {
  if (!OLD_TOKEN.test(token)) return undefined;
  let text: string, list: unknown;
  try {
    text = readFileSync(join(dir, name), 'utf8');
    list = JSON.parse(text);
  } catch {
    return undefined;
  }
  if (!Array.isArray(list) || list.length === 0 || JSON.stringify(list) !== text) return undefined;
  const dests = new Set<string>();
  for (const f of list as Array<Record<string, unknown>>) {
    if (typeof f !== 'object' || f === null || Array.isArray(f)) return undefined;
    const keys = Object.keys(f).join(',');
    if (keys !== 'tmp,dest' && !(keys === 'tmp,dest,folder' && f.folder === true)) return undefined;
    const { tmp, dest } = f;
    if (!isPathText(tmp) || !isPathText(dest) || resolve(dest) !== dest || resolve(tmp) !== tmp || dirname(tmp) !== dirname(dest)) return undefined;
    const tail = `-${basename(dest)}.tmp`;
    const head = OLD_TEMP_HEAD.exec(basename(tmp).slice(0, -tail.length));
    if (!basename(tmp).endsWith(tail) || head?.[1] !== pid || dests.has(dest)) return undefined;
    dests.add(dest);
  }
  const files = list as StagedFile[];
  return dirname(files[0]!.dest) === resolve(dir) ? files : undefined;
}

/** What a run tells about leftovers it leaves alone (the CLI prints it as a warning line; see onOutputNotice). */
let noticeHandler: (text: string) => void = (text) => process.emitWarning(text);
const noticed = new Set<string>();

/** Where notices about leftovers go (the CLI: a `pleat: warning:` line on stderr); by default, process warnings. */
export function onOutputNotice(handler: (text: string) => void): void {
  noticeHandler = handler;
}

/** Tell once per process about `path` (from the main thread, which looks at every folder a worker does). */
function notice(path: string, text: string): void {
  if (!isMainThread || noticed.has(path)) return;
  noticed.add(path);
  noticeHandler(text);
}

/** The entries of a commit record, or undefined when the file is not one in pleat's form. */
function readCommitRecord(path: string): StagedFile[] | undefined {
  try {
    const parsed = JSON.parse(readFileSync(path, 'utf8')) as unknown;
    // (a path no file can have, with a NUL byte or an overlong part, is not pleat's: acting on it could only fail)
    if (!Array.isArray(parsed) || !parsed.every((f) => isPathText(f?.tmp) && isPathText(f?.dest))) return undefined;
    return parsed as StagedFile[];
  } catch {
    return undefined;
  }
}

/**
 * Remove `name` from `dir` when a record listed it, it is named as `kind` (a temporary or a commit record), and
 * the process its name carries is gone. Gives undefined when the name is not of that kind, else false when it
 * could not be removed (another user's, in a shared folder), true otherwise.
 */
function removeLeft(dir: string, name: string, kind: RegExp): boolean | undefined {
  const m = kind.exec(name);
  if (!m) return undefined;
  return alive(Number(m[1])) || removeQuietly(join(dir, name));
}

/**
 * Remove a dead run's leftover (a file, a folder, a record); say whether it is gone. Clearing up after another run
 * never ends this one: what cannot be removed (EPERM on another user's file in a sticky folder) stays.
 */
function removeQuietly(path: string): boolean {
  try {
    rmSync(path, { force: true, recursive: true });
    return true;
  } catch {
    return false;
  }
}

/**
 * The highest folder on the way to `folder` (itself, or one above it) that does not exist yet. A link to nothing
 * counts as there: the folder below it is refused as having no parent, not made in the link's place.
 */
function highestMissing(folder: string, label: string): string {
  const there = (p: string) => entryAt(p, label) !== undefined || lstatSync(p, { throwIfNoEntry: false }) !== undefined;
  let top = resolve(folder);
  for (let up = dirname(top); up !== top && !there(up); up = dirname(up)) top = up;
  return top;
}

const live = new Set<OutputSet>();
let exitHook = false;

/** Whether a commit record was written long enough ago that its writer is gone (see RECORD_STALE_MS). */
function staleRecord(path: string): boolean {
  const st = statSync(path, { throwIfNoEntry: false });
  return st !== undefined && Date.now() - st.mtimeMs > RECORD_STALE_MS;
}

/** Every folder a transaction of this thread stages into or watches: at exit, what this process left there goes. */
const touched = new Set<string>();

/**
 * Remove the temporaries of every transaction not yet committed, and of those handed over and not yet adopted
 * (at exit: a TERM or Ctrl-C ends the CLI through process.exit).
 */
export function abortAllOutputs(): void {
  for (const s of [...live]) s.abort();
  clearLeftovers(touched);
}

/**
 * Remove what transactions of this process that are not live left in `dirs` (a crashed or stopped worker's
 * temporaries, and the records of sets whose files were handed over): whatever an intent record carrying this
 * process's tag names, unless a live set holds it. Only on the main thread: a worker's set cannot see its sibling
 * workers' live sets, whose files these would be. (A main-thread set closes while worker threads stage only when
 * they are stopped: the CLI closes its sets after its workers.)
 */
function clearLeftovers(dirs: Iterable<string>): void {
  if (!isMainThread) return;
  const mine = `.pleat-${process.pid}-${PROCESS_TAG}`;
  const liveRecords = new Set([...live].map((s) => s.recordName));
  const held = new Set([...live].flatMap((s) => s.heldTemporaries()));
  for (const dir of dirs) {
    let names: string[];
    try { names = readdirSync(dir); } catch { continue; }
    for (const n of names) {
      if (!n.startsWith(mine) || !INTENT_NAME.test(n) || liveRecords.has(n)) continue;
      const listed = readIntent(join(dir, n));
      if (!listed) continue;
      for (const t of listed) {
        if ((TEMP_NAME.test(t) || COMMIT_NAME.test(t)) && t.startsWith(mine) && !held.has(join(dir, t))) rmSync(join(dir, t), { force: true, recursive: true });
      }
      rmSync(join(dir, n), { force: true });
    }
  }
}

export class OutputSet {
  private readonly token = `${PROCESS_TAG}${randomBytes(3).toString('hex')}`;
  private counter = 0;
  private readonly protectedKeys = new Map<string, string>();
  private readonly reservedKeys = new Map<string, string>();
  private staged: StagedFile[] = [];
  private readonly dirs = new Set<string>();
  /** Folders where files of this process's other transactions (worker threads') are cleared when this set closes. */
  private readonly watched = new Set<string>();
  private readonly intents = new IntentLog(`.pleat-${process.pid}-${this.token}`);

  constructor() {
    live.add(this);
    if (!exitHook) {
      exitHook = true;
      process.on('exit', abortAllOutputs);
    }
  }

  /** What a path is when it is a protected input (as protect() named it), else undefined. */
  private inputAt(path: string): string | undefined {
    for (const k of fileKeys(path)) {
      const what = this.protectedKeys.get(k);
      if (what) return what;
    }
    return undefined;
  }

  /** A file that must never be written: an input model or one of its side files. */
  protect(path: string, what: string): void {
    for (const k of fileKeys(path)) if (!this.protectedKeys.has(k)) this.protectedKeys.set(k, `${what} ${path}`);
  }

  /**
   * Claim a destination, or refuse it (exit 2) naming the flag and the file: it must be in an existing writable
   * folder, not be a folder, not be an input, not be claimed twice. `sideOf` marks a side file of that output
   * model: an existing file there is replaced only when it is pleat's own output for that model.
   */
  reserve(dest: string, role: string, sideOf?: string): string {
    const full = resolve(dest);
    const dir = dirname(full);
    const st = entryAt(dir, `${role} ${dest}`);
    if (!st) throw new PleatError('bad-input', `${role} ${dest}: the folder ${dir} does not exist`);
    if (!st.isDirectory()) throw new PleatError('bad-input', `${role} ${dest}: ${dir} is not a folder`);
    try { accessSync(dir, constants.W_OK); } catch {
      throw new PleatError('bad-input', `${role} ${dest}: cannot write in the folder ${dir}`);
    }
    const here = entryAt(full, `${role} ${dest}`);
    if (here?.isDirectory()) throw new PleatError('bad-input', `${role} ${dest}: is a folder`);
    this.checkTempLength(full, role, dest, 'file');
    const special = specialKind(here);
    if (special) {
      const hint = role.startsWith('--report') ? '; for the report on stdout, use --format' : '';
      throw new PleatError('bad-input', `${role} ${dest}: is ${special}, not a file; pleat writes whole files into place and would replace it${hint}`);
    }
    const keys = fileKeys(full);
    for (const k of keys) {
      const input = this.protectedKeys.get(k);
      if (input) throw new PleatError('bad-input', `${role} ${dest}: refusing to overwrite the ${input}; choose another path`);
      const other = this.reservedKeys.get(k);
      if (other === `${role} ${dest}`) return full; // claimed again by the same step (a fold started over)
      if (other) throw new PleatError('bad-input', `${role} ${dest} is also written as ${other}; give each output its own path`);
    }
    if (sideOf !== undefined && here && !ownsSideFile(sideOf, full)) {
      throw new PleatError('bad-input', `${role} ${dest}: a file of that name exists and is not pleat's side file for ${sideOf}; move it away or choose another output name`);
    }
    for (const k of keys) this.reservedKeys.set(k, `${role} ${dest}`);
    if (!this.dirs.has(dir)) { this.dirs.add(dir); touched.add(dir); recoverFolder(dir, (p) => this.inputAt(p)); }
    return full;
  }

  /** Refuse a name that fits a folder entry but not once lengthened into its temporary name. */
  private checkTempLength(full: string, role: string, dest: string, what: 'file' | 'folder'): void {
    const tempLength = Buffer.byteLength(`.pleat-${process.pid}-${this.token}${this.counter + 99}-${basename(full)}.tmp`);
    if (tempLength > NAME_MAX) {
      throw new PleatError('bad-input', `${role} ${dest}: the ${what} name is too long to write (${Buffer.byteLength(basename(full))} bytes; at most ${Buffer.byteLength(basename(full)) - (tempLength - NAME_MAX)} here, since it is written under a longer temporary name first)`);
    }
  }

  /** A temporary name for `dest`, in its folder, named in this set's intent record there (make it next). */
  tempFor(dest: string): string {
    const tmp = join(dirname(dest), `.pleat-${process.pid}-${this.token}${this.counter++}-${basename(dest)}.tmp`);
    this.intents.note(tmp);
    return tmp;
  }

  /**
   * Also clear, when this set closes, what this process's other transactions left in `dir`: the CLI's set for a
   * batch watches the folders its worker threads stage into, so files of jobs stopped by a TERM go too.
   */
  watch(dir: string): void {
    this.watched.add(resolve(dir));
    touched.add(resolve(dir));
  }

  /** Stage text or bytes for a reserved destination (or let `write` write the temporary file). */
  stage(dest: string, content: string | Uint8Array | ((tmp: string) => void)): void {
    const full = resolve(dest);
    try {
      const tmp = this.tempFor(full);
      this.staged.push({ tmp, dest: full });
      if (typeof content === 'function') content(tmp); else writeFileSync(tmp, content);
    } catch (e) {
      if (e instanceof PleatError) throw e;
      throw new PleatError('bad-input', `${dest}: cannot write (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
    }
  }

  /** Take over files another set (a worker's) staged; their destinations are reserved here again. */
  adopt(files: readonly StagedFile[], role: string): void {
    files.forEach((f, i) => {
      this.staged.push(f);
      if (f.folder) this.reserveFolder(f.dest, '--save-probes');
      else this.reserve(f.dest, i === 0 ? role : `${role}'s side file`, i === 0 ? undefined : files[0]!.dest);
    });
  }

  /**
   * Claim a folder to be written whole (--save-probes), or refuse it (exit 2) naming the flag: its parent must be an
   * existing writable folder, and the folder itself new or empty, an input's path or claimed by no other output.
   * It is written at a temporary name beside it and renamed in at commit with the other outputs.
   */
  reserveFolder(dest: string, role: string): string {
    const full = resolve(dest);
    const parent = dirname(full);
    const st = entryAt(parent, `${role} ${dest}`);
    if (!st?.isDirectory()) throw new PleatError('bad-input', `${role} ${dest}: the folder ${parent} does not exist`);
    try { accessSync(parent, constants.W_OK); } catch {
      throw new PleatError('bad-input', `${role} ${dest}: cannot write in the folder ${parent}`);
    }
    const here = entryAt(full, `${role} ${dest}`);
    if (here && !here.isDirectory()) throw new PleatError('bad-input', `${role} ${dest}: a file of that name exists; give a new or empty folder`);
    if (here && readdirSync(full).length) throw new PleatError('usage', `${role} ${dest}: the folder is not empty; give a new or empty folder`);
    this.checkTempLength(full, role, dest, 'folder');
    for (const k of fileKeys(full)) {
      const input = this.protectedKeys.get(k);
      if (input) throw new PleatError('bad-input', `${role} ${dest}: refusing to overwrite the ${input}; choose another path`);
      const other = this.reservedKeys.get(k);
      if (other === `${role} ${dest}`) return full;
      if (other) throw new PleatError('bad-input', `${role} ${dest} is also written as ${other}; give each output its own path`);
    }
    for (const k of fileKeys(full)) this.reservedKeys.set(k, `${role} ${dest}`);
    if (!this.dirs.has(parent)) { this.dirs.add(parent); touched.add(parent); recoverFolder(parent, (p) => this.inputAt(p)); }
    return full;
  }

  /**
   * Stage the files of `folder` (name, writer of the file at the path it is given): when the folder exists, each
   * file at a temporary name beside it; otherwise the highest folder on its path that is not there yet, whole, made
   * at a temporary name with the folders below it inside, so a run that does not commit leaves no folder either
   * (`a/b/c` with no `a/b`: `a/b` is staged). Gives the staged path of each file, by name (to be read back before
   * the commit).
   */
  stageFiles(folder: string, exists: boolean, files: ReadonlyArray<readonly [string, (path: string) => void]>, role: string): Map<string, string> {
    const staged = new Map<string, string>();
    const claimed = this.claimFiles(folder, exists, files.map(([name]) => name), role);
    if (exists) {
      files.forEach(([name, write], i) => this.stage(claimed[i]!, (tmp) => { staged.set(name, tmp); write(tmp); }));
    } else {
      const top = claimed[0]!;
      this.stageFolder(top, (tmp) => {
        const inside = join(tmp, relative(top, resolve(folder)));
        mkdirSync(inside, { recursive: true });
        for (const [name, write] of files) {
          const path = join(inside, name);
          staged.set(name, path);
          write(path);
        }
      });
    }
    return staged;
  }

  /**
   * Claim what stageFiles writes for the files `names` of `folder` (each file when the folder exists, else the
   * highest missing folder on its path), or refuse it; gives the claimed paths. A set that only claims and is then
   * aborted checks the destinations before any work, writing nothing (evaluate --save, whose file names are known
   * once the model is read).
   */
  claimFiles(folder: string, exists: boolean, names: readonly string[], role: string): string[] {
    if (exists) return names.map((name) => this.reserve(join(folder, name), role));
    const top = highestMissing(folder, `${role} ${folder}`);
    this.reserveFolder(top, role);
    return [top];
  }

  /** Write a reserved folder at a temporary name beside it (`write` creates and fills the folder it is given). */
  stageFolder(dest: string, write: (tmp: string) => void): void {
    const full = resolve(dest);
    try {
      const tmp = this.tempFor(full);
      this.staged.push({ tmp, dest: full, folder: true });
      write(tmp);
    } catch (e) {
      if (e instanceof PleatError) throw e;
      const code = (e as NodeJS.ErrnoException).code;
      if (code === undefined) throw e; // not a failure to write: a bug, reported as one
      throw new PleatError('bad-input', `${dest}: cannot write (${code})`);
    }
  }

  /**
   * Give the staged files to the caller (who adopts them into its own set); this set then owns nothing. Its intent
   * records stay, naming the files until the adopting set, on the main thread, has renamed them in or removed them.
   */
  handOver(): StagedFile[] {
    const files = this.staged;
    this.staged = [];
    live.delete(this);
    return files;
  }

  /** The staged files, taken out of this set (for discard). */
  handOverPending(): StagedFile[] {
    return [...this.staged];
  }

  /** Add files staged by a lower-level writer (already at temporary names from tempFor). */
  add(files: readonly StagedFile[]): void {
    this.staged.push(...files);
  }

  /** Drop staged files that will not be committed (a failed check), removing their temporaries. */
  discard(files: readonly StagedFile[]): void {
    for (const f of files) rmSync(f.tmp, { force: true, recursive: true });
    this.staged = this.staged.filter((f) => !files.includes(f));
  }

  /** Rename every staged file into place; the commit record lets a later run finish if this one is killed. */
  commit(): string[] {
    if (!this.staged.length) { this.close(); return []; }
    killPoint('staged');
    const record = join(dirname(this.staged[0]!.dest), `.pleat-${process.pid}-${this.token}.commit`);
    let moving: StagedFile | undefined;
    try {
      this.intents.note(record);
      writeFileSync(record, JSON.stringify(this.staged));
      killPoint('recorded');
      this.staged.forEach((f, i) => {
        moving = f;
        renameSync(f.tmp, f.dest);
        if (i === 0) killPoint('renamed-one');
      });
    } catch (e) {
      rmSync(record, { force: true });
      this.abort();
      const code = (e as NodeJS.ErrnoException).code;
      // (a folder that is not empty at a folder's destination: made there by someone else since it was claimed)
      const why = code === 'ENOTEMPTY' || code === 'EEXIST' ? `${code}: a folder that is not empty is there now` : code ?? String(e);
      throw new PleatError('bad-input', moving ? `cannot move ${moving.dest} into place (${why})` : `cannot move the outputs into place (${why})`);
    }
    killPoint('renamed-all');
    rmSync(record, { force: true });
    const done = this.staged.map((f) => f.dest);
    this.staged = [];
    this.close();
    return done;
  }

  /** Remove every temporary of this set (and any this process left in its folders, e.g. from a crashed worker). */
  abort(): void {
    for (const f of this.staged) rmSync(f.tmp, { force: true, recursive: true });
    this.staged = [];
    this.close();
  }

  /** The name of this set's intent record in each folder it stages into. */
  get recordName(): string {
    return `${this.intents.stem}.intent`;
  }

  /** The temporaries this set holds (to commit or remove), as full paths. */
  heldTemporaries(): string[] {
    return this.staged.map((f) => resolve(f.tmp));
  }

  private close(): void {
    live.delete(this);
    this.intents.clear();
    clearLeftovers(new Set([...this.dirs, ...this.watched]));
  }
}
