// Running fold or audit over one or many models. One model runs in this process; several run on a pool of
// worker threads (one per core, never more than there are models), each calling the same library job. Results
// come back in input order whatever order the workers finish in, and a model that fails (bad input, or a bug)
// becomes an error entry: it never stops the others. The batch's exit code is the worst of its models. A TERM or
// Ctrl-C stops every worker where it is: the batch then never finishes, and reports no model at all (cancel.ts).
import { isMainThread, Worker } from 'node:worker_threads';
import { basename } from 'node:path';
import { availableParallelism } from 'node:os';
import { isPleatError } from '../src/errors.js';
import { workerOutputEnv, type StagedFile } from '../src/jobs/outputs.js';
import type { AuditJobOptions, AuditReport, FoldJobOptions, FoldReport } from '../src/jobs/types.js';
import { EXIT } from '../src/report/exit-codes.js';
import { readModelFile } from '../src/onnx/read.js';
import { checkNames, modelNames, type ModelNames } from '../src/jobs/names.js';
import { asMap } from '../src/verify/inputs.js';
import type { Outcome } from '../src/report/render.js';
import type { Progress } from './progress.js';
import { runFigures } from './output.js';
import { beforeCancel } from './cancel.js';

export type Job = (
  | { command: 'fold'; model: string; output: string; opts: FoldJobOptions }
  | { command: 'audit'; model: string; opts: AuditJobOptions }
) & { runFigures?: boolean };

/** An outcome, plus (for fold) the staged output files to commit with the reports and the input files to guard. */
export type JobOutcome = Outcome<FoldReport | AuditReport> & { staged?: StagedFile[]; inputs?: string[] };

/**
 * Names given to a batch (--keep, --dim, --shape, or the config file) must each match in at least one of its
 * models; checked before any job runs, which then skip their own one-model check. A model that cannot be read
 * is left out here: its job reports why.
 */
export function checkBatchNames(jobs: readonly Job[]): Job[] {
  const opts = jobs[0]!.opts as FoldJobOptions;
  if (!(opts.keep ?? []).length && !asMap(opts.dims).size && !asMap(opts.shapes).size) return [...jobs];
  const models: ModelNames[] = [];
  for (const j of jobs) {
    try { models.push(modelNames(readModelFile(j.model), j.model, (opts.keep ?? []).length > 0)); } catch (e) { if (!isPleatError(e)) throw e; }
  }
  if (models.length) checkNames(models, { keep: opts.keep, dims: asMap(opts.dims).keys(), shapes: asMap(opts.shapes).keys(), origins: opts.origins });
  return jobs.map((j) => ({ ...j, opts: { ...j.opts, namesChecked: true } }) as Job);
}

// The job modules, loaded for the command being run only (audit needs none of fold's proof and check machinery,
// and loading modules is a good part of a command's start-up).
let foldJob: typeof import('../src/jobs/fold.js') | undefined;
let auditJob: typeof import('../src/jobs/audit.js') | undefined;

/** Load the job module of a job's command (and a proven fold's checks); runJob and runOne need it loaded first. */
export async function loadJob(job: Job): Promise<void> {
  if (job.command === 'fold') {
    foldJob ??= await import('../src/jobs/fold.js');
    if (!job.opts.noProofs) await (await import('../src/jobs/check-kit.js')).loadCheckKit();
  } else {
    auditJob ??= await import('../src/jobs/audit.js');
  }
}

/** Run one job here and now; errors are thrown (a single model's error ends the command as usual). */
export function runJob(job: Job): JobOutcome {
  const started = process.hrtime.bigint();
  if (job.command === 'fold') {
    if (!foldJob) throw new Error('runJob: the fold job is not loaded (call loadJob first)');
    const r = foldJob.foldStaged(job.model, job.output, job.opts);
    signalWhileStaged(job.model);
    if (job.runFigures) r.report.run = runFigures(started);
    return { model: job.model, report: r.report, exitCode: r.report.failed ? EXIT.failed : EXIT.ok, staged: r.staged, inputs: r.inputs };
  }
  if (!auditJob) throw new Error('runJob: the audit job is not loaded (call loadJob first)');
  const report = auditJob.auditFile(job.model, job.opts);
  if (job.runFigures) report.run = runFigures(started);
  return { model: job.model, report, exitCode: report.failed ? EXIT.failed : EXIT.ok };
}

/**
 * Test hook: PLEAT_SIGNAL_AFTER_STAGING=<model file name> sends TERM once that model's files are staged; on a
 * worker thread the job then stays busy (up to 30 s), as a long job would, so the signal meets a worker at work
 * with its files staged.
 */
function signalWhileStaged(model: string): void {
  if (process.env.PLEAT_SIGNAL_AFTER_STAGING !== basename(model)) return;
  process.kill(process.pid, 'SIGTERM');
  const until = Date.now() + 30_000;
  while (!isMainThread && Date.now() < until) { /* busy, as a fold is */ }
}

/** Run one job of a batch; expected failures and bugs both become an outcome. */
export function runOne(job: Job): JobOutcome {
  try {
    return runJob(job);
  } catch (e) {
    if (isPleatError(e)) {
      // in a batch every line must say which model it is about
      const message = e.message.includes(job.model) ? e.message : `${job.model}: ${e.message}`;
      return { model: job.model, error: { kind: e.kind, message }, exitCode: EXIT.badInput };
    }
    const msg = e instanceof Error ? e.message.split('\n')[0] : String(e);
    return { model: job.model, error: { kind: 'internal', message: `internal error while processing ${job.model}: ${msg} (this is a bug; rerun with PLEAT_DEBUG=1 and report it)` }, exitCode: EXIT.internal };
  }
}

const crashed = (job: Job, why: string): JobOutcome => ({
  model: job.model, error: { kind: 'internal', message: `internal error: the worker processing ${job.model} stopped (${why}); this is a bug, please report it` }, exitCode: EXIT.internal,
});

/** Run jobs on `workers` threads (default: one per core); outcomes in the order of `jobs`. */
export async function runBatch(jobs: readonly Job[], progress: Progress, workers = availableParallelism()): Promise<JobOutcome[]> {
  const results: JobOutcome[] = new Array(jobs.length);
  if (jobs.length === 0) return results;
  if (jobs.length === 1) {
    await loadJob(jobs[0]!);
    results[0] = runJob(jobs[0]!);
    progress.tick(jobs[0]!.model);
    return results;
  }
  let next = 0;
  // A cancelled run stops every worker where it is, before its temporaries are removed; no lane then starts
  // another worker, counts a job as done or crashed, or finishes: the process ends with the signal's code.
  const running = new Set<Worker>();
  let stopping = false;
  const forget = beforeCancel(() => { stopping = true; return Promise.all([...running].map((w) => w.terminate())); });
  const lane = (): Promise<void> => new Promise((resolve) => {
    if (stopping) return;
    if (next >= jobs.length) { resolve(); return; }
    const w = new Worker(new URL('./batch-worker.js', import.meta.url), { env: workerOutputEnv() });
    running.add(w);
    let current = -1;
    const finish = (i: number, o: JobOutcome) => { results[i] = o; progress.tick(jobs[i]!.model); };
    const feed = () => {
      if (next >= jobs.length) { current = -1; void w.terminate().then(() => resolve()); return; }
      current = next++;
      w.postMessage({ index: current, job: jobs[current] });
    };
    w.on('message', (m: { index: number; outcome: JobOutcome }) => { if (stopping) return; finish(m.index, m.outcome); feed(); });
    // a worker that dies takes only its current model with it; the lane starts over with a fresh worker
    w.on('error', (e) => { if (stopping) return; if (current >= 0) finish(current, crashed(jobs[current]!, e.message.split('\n')[0]!)); current = -1; void lane().then(resolve); });
    w.on('exit', (code) => {
      running.delete(w);
      if (stopping) return;
      if (current >= 0) { finish(current, crashed(jobs[current]!, `exit code ${code}`)); current = -1; void lane().then(resolve); }
    });
    feed();
  });
  const n = Math.max(1, Math.min(workers, jobs.length));
  try {
    await Promise.all(Array.from({ length: n }, () => lane()));
  } finally {
    forget();
  }
  return results;
}
