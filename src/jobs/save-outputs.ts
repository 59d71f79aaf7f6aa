// Saving a run's outputs (evaluate --save): DIR/<safe name>.npy for each output and DIR/outputs.json, written
// through the output transaction (outputs.ts), so they are renamed in together or not at all, and a killed run's
// temporaries are named in intent records for the next run to clear. A folder not there yet is staged whole at a
// temporary name beside it, and so is the highest of its missing parents (`--save a/b/c` with no `a/b`: `a/b`,
// holding c), so a run that does not commit leaves no folder either; they are all renamed in at the commit.
import { statSync, writeFileSync } from 'node:fs';
import { resolve } from 'node:path';
import { PleatError } from '../errors.js';
import type { Value } from '../eval/value.js';
import { outputFiles, savedFileNames, type SavedOutputs, type SaveOptions } from '../verify/evaluate.js';
import { OutputSet } from './outputs.js';

export type { SavedOutputs, SaveOptions };

/** Outputs staged, not yet renamed in: the caller commits (the CLI lets a TERM or Ctrl-C end the run first). */
export interface StagedOutputs {
  saved: SavedOutputs;
  commit(): SavedOutputs;
  abort(): void;
}

const cannotCreate = (dir: string, code: string | undefined) =>
  new PleatError('bad-input', `${dir}: cannot create the output folder (${code ?? 'unknown error'})`);

/** Whether DIR is there (a folder), or refused: a file or something else that cannot be it. */
function folderThere(dir: string): boolean {
  try {
    const st = statSync(resolve(dir), { throwIfNoEntry: false });
    if (st && !st.isDirectory()) throw cannotCreate(dir, 'EEXIST');
    return st !== undefined;
  } catch (e) {
    if (e instanceof PleatError) throw e;
    throw cannotCreate(dir, (e as NodeJS.ErrnoException).code);
  }
}

/**
 * Check, before any work, that the outputs named `outputNames` can be saved in DIR (the files they will have and
 * outputs.json, or DIR made at the commit): the same refusals staging would give, with nothing written.
 */
export function checkSaveTarget(dir: string, outputNames: readonly string[], opts: Pick<SaveOptions, 'reads'> = {}): void {
  const full = resolve(dir);
  const exists = folderThere(dir);
  const tx = new OutputSet();
  try {
    for (const [p, what] of opts.reads ?? []) tx.protect(p, what);
    tx.claimFiles(full, exists, savedFileNames(outputNames), '--save');
  } finally {
    tx.abort();
  }
}

/** Stage OUTPUTS for DIR without renaming anything in. */
export function saveOutputsStaged(dir: string, outputs: ReadonlyMap<string, Value>, opts: SaveOptions = {}): StagedOutputs {
  const { files, contents } = outputFiles(outputs, opts);
  const full = resolve(dir);
  const exists = folderThere(dir);
  const tx = new OutputSet();
  try {
    for (const [p, what] of opts.reads ?? []) tx.protect(p, what);
    tx.stageFiles(full, exists, contents.map(([name, body]) => [name, (path: string) => writeFileSync(path, body)] as const), '--save');
  } catch (e) {
    tx.abort();
    throw e;
  }
  const saved = { dir, files };
  return { saved, commit: () => { tx.commit(); return saved; }, abort: () => tx.abort() };
}

/** Write OUTPUTS into DIR: every file renamed in together, or none (see saveOutputsStaged). */
export function saveOutputs(dir: string, outputs: ReadonlyMap<string, Value>, opts: SaveOptions = {}): SavedOutputs {
  const staged = saveOutputsStaged(dir, outputs, opts);
  try {
    return staged.commit();
  } catch (e) {
    staged.abort();
    throw e;
  }
}
