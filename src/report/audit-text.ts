// audit's report as text: the same ledger lines fold prints (status foldable or kept), a totals line, the
// --fail-on verdict. No caution lines: they are about agreement on probe inputs, and audit runs no probes.
import type { AuditReport } from '../jobs/types.js';
import { ledgerLines } from './ledger-text.js';
import { paint } from './paint.js';

export function auditText(r: AuditReport, colour = false): string {
  const p = paint(colour);
  const lines = [p.bold(`audit ${r.model}`)];
  if (r.normalizations.length === 0) lines.push('  no normalizations found');
  lines.push(...ledgerLines(r.normalizations, p));
  lines.push(`  ${r.foldable} foldable, ${r.kept} kept`);
  if (r.failOn === 'kept') lines.push(r.failed ? p.bad(`--fail-on kept: FAILED (${r.kept} kept)`) : p.good('--fail-on kept: passed'));
  return lines.join('\n') + '\n';
}
