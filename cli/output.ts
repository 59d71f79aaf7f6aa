// Turning results into output: which format stdout gets (--format, or --json as its shorthand), the
// --report files (each written atomically), and colour only for a person at a terminal.
import { rmdirSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import { PleatError } from '../src/errors.js';
import { FORMATS, useColour, type Format } from '../src/report/format.js';
import { parseReportSpecs } from '../src/report/files.js';
import type { OutputSet, StagedFile } from '../src/jobs/outputs.js';
import { flushed, out, sayError } from './errors.js';
import { prefetchSettled } from '../src/onnx/prefetch.js';
import { beforeCancel, signalsFirst } from './cancel.js';

export interface ReportFlags {
  json?: boolean;
  format?: string;
  report?: string[];
  runFigures?: boolean;
}

/** The stdout format: --format, with --json meaning --format json (the two must not disagree). */
export function stdoutFormat(flags: ReportFlags): Format {
  const f = flags.format ?? (flags.json ? 'json' : 'text');
  if (!(FORMATS as readonly string[]).includes(f)) throw new PleatError('usage', `--format ${f}: choose one of ${FORMATS.join(', ')}`);
  if (flags.json && f !== 'json') throw new PleatError('usage', `--json and --format ${f} disagree; give one of them`);
  return f as Format;
}

export interface ReportPlan {
  format: Format;
  files: ReturnType<typeof parseReportSpecs>;
  /** An HTML report is wanted: the jobs also record what the page shows beyond the ledger (SHA-256, sketches). */
  pageDetail: boolean;
  /** --run-figures: record wall time and peak memory. */
  runFigures: boolean;
}

/** Check flags before any work runs, so a usage error never costs a long job. */
export function planReports(flags: ReportFlags): ReportPlan {
  const format = stdoutFormat(flags), files = parseReportSpecs(flags.report ?? []);
  return { format, files, pageDetail: format === 'html' || files.some((f) => f.format === 'html'), runFigures: flags.runFigures === true };
}

/** Wall time and peak resident memory of this process so far, for --run-figures. */
export function runFigures(startedAt: bigint): { seconds: number; peakMemoryBytes: number } {
  const seconds = Number(process.hrtime.bigint() - startedAt) / 1e9;
  return { seconds: Math.round(seconds * 1000) / 1000, peakMemoryBytes: process.resourceUsage().maxRSS * 1024 };
}

/** What a command's outputs must respect: files read (never written) and output files already decided. */
export interface OutputGuard {
  inputs?: readonly string[];
  /** Other files the run reads, as [path, what] (config file, --input files): never replaced either. */
  reads?: ReadonlyArray<readonly [string, string]>;
  /** Outputs of the run as [path, flag]: a report may not take their place. */
  outputs?: ReadonlyArray<readonly [string, string]>;
}

/** Claim every file the run reads (models, config file, --input files) as never to be written. */
function protectReads(tx: OutputSet, guard: OutputGuard): void {
  for (const i of guard.inputs ?? []) tx.protect(i, 'input model');
  for (const [p, what] of guard.reads ?? []) tx.protect(p, what);
}

/**
 * The claim of one --report file, with its format: two formats written to one spelling of a path would otherwise
 * carry the same label, which the output set takes for one step claiming its file again.
 */
const reportRole = (spec: { format: Format }) => `--report (${spec.format})`;

/**
 * Check every destination before any work runs (folders exist and are writable, no report replaces an input or
 * an output, no two outputs share a file), so a usage mistake never costs a long job or writes anything.
 */
export async function checkDestinations(plan: ReportPlan, guard: OutputGuard): Promise<void> {
  const { OutputSet } = await outputsModule();
  const tx = new OutputSet();
  try {
    protectReads(tx, guard);
    for (const [o, flag] of guard.outputs ?? []) tx.reserve(o, flag);
    for (const spec of plan.files) tx.reserve(spec.file, reportRole(spec));
  } finally {
    tx.abort();
  }
}

/**
 * The output transaction's module (loaded when used: --help needs none of it), its notices about leftovers it
 * leaves alone (a record it cannot tell for pleat's) printed as one `pleat: warning:` line each.
 */
export async function outputsModule(): Promise<typeof import('../src/jobs/outputs.js')> {
  const m = await import('../src/jobs/outputs.js');
  m.onOutputNotice((text) => sayError(`warning: ${text}`));
  return m;
}

/**
 * Folders a command made for its outputs, from `highest` down to `folder`, are removed at exit when they are still
 * empty: a run refused, failed (a gate) or cancelled after making them leaves none of them. A folder holding
 * anything stays, and so does every folder above it. (Removed after the output transaction's own clean-up, whose
 * temporaries would keep them.)
 */
export async function removeAtExitIfEmpty(highest: string, folder: string): Promise<void> {
  const { abortAllOutputs } = await outputsModule();
  const chain: string[] = [];
  for (let d = resolve(folder); ; d = dirname(d)) {
    chain.push(d);
    if (d === resolve(highest) || dirname(d) === d) break;
  }
  process.on('exit', () => {
    abortAllOutputs();
    for (const d of chain) {
      try { rmdirSync(d); } catch { return; }
    }
  });
}

/** A new output transaction. */
async function openOutputs(): Promise<OutputSet> {
  const { OutputSet } = await outputsModule();
  return new OutputSet();
}

/**
 * Print stdout's report (coloured only on a TTY without NO_COLOR) and write every --report file (never coloured)
 * together with the files `staged` by the jobs, in one transaction (`opened`, or a new one): all are renamed in,
 * or none.
 */
export async function emit(plan: ReportPlan, render: (format: Format, colour: boolean) => string | Promise<string>,
  guard: OutputGuard = {}, staged: ReadonlyArray<readonly StagedFile[]> = [], opened?: OutputSet): Promise<void> {
  const tx = opened ?? await openOutputs();
  try {
    protectReads(tx, guard);
    for (const files of staged) if (files.length) tx.adopt(files, 'output');
    for (const spec of plan.files) {
      tx.reserve(spec.file, reportRole(spec));
      tx.stage(spec.file, await render(spec.format, false));
    }
    // a TERM or Ctrl-C that came during the work ends the run here, before anything is renamed in, rather than
    // after a commit that reports success for a cancelled job
    await signalsFirst();
    tx.commit();
  } catch (e) {
    tx.abort();
    throw e;
  }
  await print(await render(plan.format, plan.format === 'text' && useColour(process.stdout)));
}

/** Pieces of stdout text: each ends at the first line end past this many characters. */
const PIECE = 64 * 1024;

/**
 * Write text to stdout in pieces that end at line ends: a report of 10^5 lines written at once was first copied
 * whole into one buffer of several MB, every page of it new memory, only to be handed over.
 */
async function print(text: string): Promise<void> {
  for (let start = 0; start < text.length;) {
    const nl = text.indexOf('\n', start + PIECE);
    const end = nl < 0 ? text.length : nl + 1;
    await out(text.slice(start, end));
    start = end;
  }
}

/**
 * End the process once stdout and stderr have taken everything written to them. Returning instead lets Node take
 * the whole heap down first: some 60 ms after the last line of an audit of 10^5 nodes, for nothing the user sees.
 * Exit handlers still run (the output transaction's among them); the exit code is process.exitCode.
 */
export async function exitWhenWritten(): Promise<never> {
  await Promise.all([flushed(process.stdout), flushed(process.stderr)]);
  process.exit();
}

/** One line per failed model on stderr, in input order, as a single-model run would print it. */
export function reportErrors(lines: readonly string[]): void {
  for (const l of lines) sayError(l);
}

/**
 * Run fold or audit jobs (one worker per core), then print their reports and set the exit code to the worst
 * of the batch. The library is loaded here, not at start-up: --help or a usage error needs none of it.
 */
export async function runAndReport(command: 'fold' | 'audit', jobs: import('./batch.js').Job[], plan: ReportPlan, quiet: boolean,
  reads: ReadonlyArray<readonly [string, string]> = []): Promise<void> {
  const { runBatch, checkBatchNames } = await import('./batch.js');
  await prefetchSettled(); // (the first model read ahead while the modules loaded, see the command table)
  if (jobs.length > 1) jobs = checkBatchNames(jobs);
  const { renderJobs, isJobError } = await import('../src/report/render.js');
  const { startProgress } = await import('./progress.js');
  // The run's transaction is open while the jobs work: what they stage (here or on worker threads) is in the
  // folders it watches, so a TERM or Ctrl-C at any point removes it (see cancel.ts), and it commits their files.
  const tx = await openOutputs();
  for (const j of jobs) {
    if (j.command !== 'fold') continue;
    tx.watch(dirname(resolve(j.output)));
    if (j.opts.saveProbes !== undefined) tx.watch(dirname(resolve(j.opts.saveProbes)));
  }
  const progress = startProgress(jobs.length, command, { quiet });
  const forgetBar = beforeCancel(async () => progress.end()); // (a cancelled run leaves no bar on the terminal)
  let outcomes;
  try {
    outcomes = await runBatch(jobs, progress);
  } catch (e) {
    tx.abort();
    throw e;
  } finally {
    forgetBar();
    progress.end(); // erase the bar before any output, error lines included
  }
  reportErrors(outcomes.filter(isJobError).map((o) => o.error.message));
  const inputs = [...jobs.map((j) => j.model), ...outcomes.flatMap((o) => o.inputs ?? [])];
  await emit(plan, (format, colour) => renderJobs(command, outcomes, format, colour), { inputs, reads }, outcomes.map((o) => o.staged ?? []), tx);
  process.exitCode = Math.max(0, ...outcomes.map((o) => o.exitCode));
}
