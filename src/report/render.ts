// One place that turns job results into the four report formats, for one model or a batch. A batch of one
// prints exactly the single-model report; a larger batch prints each model in input order, and models that
// could not be processed appear as errors with their one-line message.
import type { AuditReport, FoldReport } from '../jobs/types.js';
import { SCHEMA_VERSION } from '../jobs/types.js';
import type { CompareReport } from '../verify/compare.js';
// here, not from verify/compare.ts: importing that loads the evaluator, which audit and survey never run
import { toJsonText } from './json.js';
import { auditText } from './audit-text.js';
import { compareText } from './compare-text.js';
import { CAUTION, type Format } from './format.js';
import { auditSuite, compareSuite, errorSuite, foldSuite, junitXml, type Suite } from './junit.js';
import { foldText } from './ledger-text.js';
import type { CompareExtras } from './html/page.js';
import { auditMarkdown, compareMarkdown, errorMarkdown, foldMarkdown } from './markdown.js';

export { FORMATS, type Format } from './format.js';

/** A model a batch could not process: its one-line message and the exit code it contributes. */
export interface JobError {
  model: string;
  error: { kind: string; message: string };
  exitCode: number;
}

export type Outcome<R> = { model: string; report: R; exitCode: number } | JobError;

export const isJobError = <R>(o: Outcome<R>): o is JobError => 'error' in o;

/** The JSON a batch prints: every model's report (or error) in input order, and the batch's exit code. */
export interface BatchReport<R> {
  schemaVersion: number;
  command: 'fold' | 'audit';
  exitCode: number;
  results: Array<R | JobError>;
}

type Kind = 'fold' | 'audit';

/**
 * The HTML page code (and its graph layout library) is loaded only when a page is asked for: the other formats are
 * what most runs print, and loading it took some 20 ms of every fold and audit.
 */
const htmlPages = () => import('./html/page.js');

export async function renderJobs(command: Kind, outcomes: ReadonlyArray<Outcome<FoldReport | AuditReport>>, format: Format, colour = false): Promise<string> {
  const single = outcomes.length === 1 ? outcomes[0] : undefined;
  const textOf = (r: FoldReport | AuditReport, caution: boolean) =>
    r.command === 'fold' ? foldText(r, colour, caution) : auditText(r, colour);
  switch (format) {
    case 'json': {
      if (single && !isJobError(single)) return toJsonText(single.report);
      const batch: BatchReport<FoldReport | AuditReport> = {
        schemaVersion: SCHEMA_VERSION, command, exitCode: Math.max(0, ...outcomes.map((o) => o.exitCode)),
        results: outcomes.map((o) => (isJobError(o) ? o : o.report)),
      };
      return toJsonText(batch);
    }
    case 'text': {
      if (single && !isJobError(single)) return textOf(single.report, true);
      const parts = outcomes.map((o) => (isJobError(o) ? `${command} ${o.model}: error: ${o.error.message}\n` : textOf(o.report, false)));
      // the probe caution belongs to fold (audit runs no probes)
      return parts.join('\n') + (command === 'fold' ? CAUTION.join('\n') + '\n' : '');
    }
    case 'markdown':
      return outcomes.map((o) => (isJobError(o) ? errorMarkdown(command, o.model, o.error.message)
        : o.report.command === 'fold' ? foldMarkdown(o.report) : auditMarkdown(o.report))).join('\n');
    case 'junit': {
      const suites: Suite[] = outcomes.map((o) => (isJobError(o) ? errorSuite(o.model, o.error.message, o.error.kind)
        : o.report.command === 'fold' ? foldSuite(o.report) : auditSuite(o.report)));
      return junitXml(`pleat ${command}`, suites);
    }
    case 'html': {
      const { auditBody, errorBody, foldBody, htmlDocument } = await htmlPages();
      const batch = outcomes.length > 1;
      const bodies = outcomes.map((o, i) => {
        if (isJobError(o)) return errorBody(command, o.model, o.error.message);
        const [pre, at] = batch ? [`m${i}-`, `results.${i}.`] : ['', ''];
        return o.report.command === 'fold' ? foldBody(o.report, pre, at) : auditBody(o.report, pre, at);
      });
      return htmlDocument(`pleat ${command} ${outcomes.map((o) => o.model).join(', ')}`, bodies);
    }
  }
}

/**
 * compare's JSON: the library report with the schema version, the command and the two files, and what the CLI
 * recorded beside it (the files' SHA-256 when an HTML report is asked for, the run's figures with --run-figures).
 */
export function compareJson(r: CompareReport, a: string, b: string, extras: CompareExtras = {}): object {
  return { schemaVersion: SCHEMA_VERSION, command: 'compare', a, b, ...r, ...extras };
}

export async function renderCompare(r: CompareReport, a: string, b: string, format: Format, colour = false, extras: CompareExtras = {}): Promise<string> {
  switch (format) {
    case 'html': {
      const { compareBody, htmlDocument } = await htmlPages();
      return htmlDocument(`pleat compare ${a} ${b}`, [compareBody(r, a, b, extras)]);
    }
    case 'json': return toJsonText(compareJson(r, a, b, extras));
    case 'text': return compareText(r, a, b, colour);
    case 'markdown': return compareMarkdown(r, a, b);
    case 'junit': return junitXml('pleat compare', [compareSuite(r, a, b)]);
  }
}
