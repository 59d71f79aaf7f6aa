// Reports as JUnit XML, the test-result format CI dashboards read: <testsuites> holding one <testsuite> per
// model, one <testcase> per normalization (classname = model file, name = node and op), plus fold's
// whole-model check as one <testcase> per output.
//
// How a kept normalization shows up (our choice):
// - with --fail-on kept (audit): a <failure type="kept"> carrying the reason code and hint, so the build fails;
// - otherwise: a <skipped> case whose message is the reason code and hint: visible on the dashboard as "not
//   done", without failing the build, since keeping a norm is a correct outcome.
// Folded and foldable ones pass. A failing whole-model output is a <failure type="gate">; a skipped check
// is <skipped>. Each folded layer's 8-bit readiness is one case: flagged layers are <skipped> with their SQNR
// (a warning for the dashboard, not a failed build, like a kept norm). A model that could not be read in a batch is one <testcase name="process model"> with an
// <error>. No timestamps or durations are written, so the same input gives the same bytes.
import type { AuditReport, FoldReport } from '../jobs/types.js';
import type { CompareReport } from '../verify/compare.js';
import { outputSkipped, outputSkipReason } from '../verify/status.js';
import { dbText, numText, quantLayerText } from './format.js';

export type Outcome =
  | { kind: 'pass' }
  | { kind: 'skipped'; message: string }
  | { kind: 'failure'; type: string; message: string }
  | { kind: 'error'; type: string; message: string };

export interface Case { classname: string; name: string; outcome: Outcome }
export interface Suite { name: string; cases: Case[] }

/** XML 1.0 forbids most control characters even when escaped; lone surrogates cannot be encoded either. */
function clean(s: string): string {
  return s.replace(/[\u0000-\u0008\u000b\u000c\u000e-\u001f\ufffe\uffff]|[\ud800-\udbff](?![\udc00-\udfff])|(?<![\ud800-\udbff])[\udc00-\udfff]/g, '\ufffd');
}

export function escapeXml(s: string): string {
  return clean(s).replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;').replace(/'/g, '&apos;')
    .replace(/\r/g, '&#13;').replace(/\n/g, '&#10;').replace(/\t/g, '&#9;');
}

const count = (cases: Case[], kind: Outcome['kind']) => cases.filter((c) => c.outcome.kind === kind).length;
const attrs = (cases: Case[]) =>
  `tests="${cases.length}" failures="${count(cases, 'failure')}" errors="${count(cases, 'error')}" skipped="${count(cases, 'skipped')}"`;

export function junitXml(title: string, suites: readonly Suite[]): string {
  const all = suites.flatMap((s) => s.cases);
  const out = ['<?xml version="1.0" encoding="UTF-8"?>', `<testsuites name="${escapeXml(title)}" ${attrs(all)}>`];
  for (const s of suites) {
    out.push(`  <testsuite name="${escapeXml(s.name)}" ${attrs(s.cases)}>`);
    for (const c of s.cases) {
      const head = `    <testcase classname="${escapeXml(c.classname)}" name="${escapeXml(c.name)}"`;
      const o = c.outcome;
      if (o.kind === 'pass') out.push(`${head}/>`);
      else if (o.kind === 'skipped') out.push(`${head}>`, `      <skipped message="${escapeXml(o.message)}"/>`, '    </testcase>');
      else out.push(`${head}>`, `      <${o.kind} type="${escapeXml(o.type)}" message="${escapeXml(o.message)}"/>`, '    </testcase>');
    }
    out.push('  </testsuite>');
  }
  out.push('</testsuites>');
  return out.join('\n') + '\n';
}

const caseName = (e: { node: string; op: string; graph: string }) => `${e.node} ${e.op}${e.graph === 'main' ? '' : ` in ${e.graph}`}`;

export function foldSuite(r: FoldReport): Suite {
  // One test case per normalization; other constant affine steps are no test of their own.
  const cases: Case[] = r.normalizations.filter((e) => e.kind !== 'affine-step').map((e) => ({
    classname: r.model,
    name: caseName(e),
    outcome: e.status === 'kept' ? { kind: 'skipped', message: `${e.reason ?? 'kept'}: ${e.hint}` } : { kind: 'pass' },
  }));
  const c = r.check;
  if (c && c.skipped !== null && c.outputs.length === 0) {
    const message = `${c.skipped.reason}: ${c.skipped.message}`;
    // under --strict a skipped check fails the build, so it is a failure there, never a pass
    cases.push({ classname: r.model, name: 'whole-model check', outcome: c.strict ? { kind: 'failure', type: 'strict', message } : { kind: 'skipped', message } });
  } else if (c) {
    for (const o of c.outputs) {
      if (outputSkipped(o.status)) {
        const message = `${outputSkipReason(o.status)}: ${o.problem ?? 'nothing compared'}`;
        cases.push({ classname: r.model, name: `check output ${o.name}`, outcome: c.strict ? { kind: 'failure', type: 'strict', message } : { kind: 'skipped', message } });
        continue;
      }
      const metrics = `maxAbs ${numText(o.maxAbs)}, maxRel ${numText(o.maxRel)}, rms ${numText(o.rms)}, cosine ${o.cosine}`;
      cases.push({
        classname: r.model,
        name: `check output ${o.name}`,
        outcome: o.passed ? { kind: 'pass' } : { kind: 'failure', type: 'gate', message: o.problem ?? `fails the gate (${c.gates.join('; ')}): ${metrics}` },
      });
    }
  }
  for (const q of r.quantization) {
    const figures = `worst channel ${dbText(q.sqnrBefore.worstChannel)} -> ${dbText(q.sqnrAfter.worstChannel)} dB under one per-tensor 8-bit scale (threshold ${dbText(r.quantThresholdDb)} dB)`;
    cases.push({ classname: r.model, name: `8-bit readiness ${quantLayerText(q)}`, outcome: q.flagged ? { kind: 'skipped', message: `flagged: ${figures}` } : { kind: 'pass' } });
  }
  return { name: r.model, cases };
}

export function auditSuite(r: AuditReport): Suite {
  return {
    name: r.model,
    cases: r.normalizations.filter((e) => e.kind !== 'affine-step').map((e): Case => ({
      classname: r.model,
      name: caseName(e),
      outcome: e.status !== 'kept' ? { kind: 'pass' }
        : r.failOn === 'kept' ? { kind: 'failure', type: 'kept', message: `${e.reason ?? 'kept'}: ${e.hint}` }
          : { kind: 'skipped', message: `${e.reason ?? 'kept'}: ${e.hint}` },
    })),
  };
}

export function compareSuite(r: CompareReport, a: string, b: string): Suite {
  const name = `${a} vs ${b}`;
  const suite: Suite = {
    name,
    cases: r.outputs.map((o): Case => ({
      classname: name,
      name: `output ${o.name}`,
      outcome: o.passed ? { kind: 'pass' }
        : outputSkipped(o.status) ? { kind: 'skipped', message: `${outputSkipReason(o.status)}: ${o.problem ?? 'nothing compared'}` }
          : { kind: 'failure', type: o.status === 'compared' ? 'gate' : o.status, message: o.problem ?? `output '${o.name}' failed` },
    })),
  };
  if (r.outputs.length === 0 && r.skipped) suite.cases.push({ classname: name, name: 'comparison', outcome: { kind: 'skipped', message: `${r.skipped.reason}: ${r.skipped.message}` } });
  return suite;
}

/** A model a batch could not process: one errored case, so the dashboard shows it. */
export function errorSuite(model: string, message: string, type: string): Suite {
  return { name: model, cases: [{ classname: model, name: 'process model', outcome: { kind: 'error', type, message } }] };
}
