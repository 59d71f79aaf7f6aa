// The audit job: the fold engine's own analysis, stopped before any rewrite, so audit and fold agree.
import type { Model } from '../graph/ir.js';
import { readModelFile } from '../onnx/read.js';
import { analyze } from '../fold/index.js';
import { checkJobNames } from './names.js';
import { checkOpset } from '../graph/opsets.js';
import { sketches } from '../fold/sketch.js';
import { fileSha256 } from './sha256.js';
import { externalSha256Later } from './provenance.js';
import { SCHEMA_VERSION, type AuditJobOptions, type AuditReport } from './types.js';
import { checkOptionValues } from '../verify/option-values.js';

export function auditLoaded(model: Model, label: string, opts: AuditJobOptions = {}): AuditReport {
  checkOptionValues(opts);
  checkOpset(model, label);
  checkJobNames(model, label, opts);
  const findings = analyze(model, { keep: opts.keep, keepOrigins: opts.origins?.keep, allowOverridable: opts.allowOverridable, cloneShared: opts.cloneShared });
  let norms = 0, kept = 0;
  for (const f of findings) {
    if (f.kind !== 'normalization') continue;
    norms++;
    if (f.status === 'kept') kept++;
  }
  return {
    schemaVersion: SCHEMA_VERSION,
    command: 'audit',
    model: label,
    normalizations: findings,
    foldable: norms - kept,
    kept,
    alsoFoldable: findings.length - norms,
    failOn: opts.failOn ?? null,
    failed: opts.failOn === 'kept' && kept > 0,
  };
}

export function auditFile(input: string, opts: AuditJobOptions = {}): AuditReport {
  checkOptionValues(opts);
  const model = readModelFile(input);
  const report = auditLoaded(model, input, opts);
  if (opts.pageDetail) {
    report.sha256 = fileSha256(input);
    const external = externalSha256Later(model);
    if (external) report.externalSha256 = external();
    report.sketches = sketches(model, report.normalizations);
  }
  return report;
}
