// audit's report as text: the same ledger lines fold prints (status foldable or kept), a totals line, the
// --fail-on verdict. No caution lines: they are about agreement on probe inputs, and audit runs no probes.
import type { AuditReport } from '../jobs/types.js';
import { alsoLines, cloneClause, ledgerLines } from './ledger-text.js';
import { append, plural, joinLines } from './format.js';
import { paint } from './paint.js';

export function auditText(r: AuditReport, colour = false): string {
  const p = paint(colour);
  const lines = [p.bold(`audit ${r.model}`)];
  const norms = r.normalizations.filter((e) => e.kind !== 'affine-step');
  if (norms.length === 0) lines.push('  no normalizations found');
  append(lines, ledgerLines(norms, p), alsoLines(r.normalizations, 'also foldable', p));
  const also = r.alsoFoldable ? ` (and ${plural(r.alsoFoldable, 'affine step')} also foldable)` : '';
  lines.push(`  ${r.foldable} foldable, ${r.kept} kept${also}${cloneClause(r.normalizations)}`);
  if (r.failOn === 'kept') lines.push(r.failed ? p.bad(`--fail-on kept: FAILED (${r.kept} kept)`) : p.good('--fail-on kept: passed'));
  lines.push(''); // the closing newline, inside the join: the text comes out as one flat string, not joined again
  return joinLines(lines, colour);
}
