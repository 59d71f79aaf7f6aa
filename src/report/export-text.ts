// export's report as text: fold's ledger (export folds first), then what the bundle holds and where, then the
// caution lines.
import type { ExportReport } from '../jobs/export.js';
import { bytesText, CAUTION, plural, joinLines } from './format.js';
import { foldText } from './ledger-text.js';
import { paint } from './paint.js';

export function exportText(r: ExportReport, colour = false): string {
  const p = paint(colour);
  const lines: string[] = [];
  const b = r.bundle;
  // (with --strict a skipped check stops the export too: say which it was)
  if (b === null) lines.push(p.bad(`bundle: nothing written (${r.fold.check?.status === 'skipped' ? '--strict: the whole-model check was skipped' : 'the whole-model check failed'})`));
  else {
    lines.push(p.bold(`bundle ${b.format} -> ${b.dir}: ${plural(b.tensors, 'tensor')}, ${bytesText(b.bytes)}`));
    for (const f of b.files) lines.push(`  wrote ${f}`);
    const rb = b.readBack;
    lines.push(rb.status === 'passed'
      ? `  read back: ${plural(rb.tensors, 'tensor')}, ${plural(rb.elements, 'element')} (${bytesText(rb.bytes)}) compared with the checked model bit for bit: all match`
      : `  read back: ${p.warn('skipped')} (the bundle holds no tensor, so no weight was compared)`);
    for (const s of b.skipped) lines.push(`  ${p.warn('skipped')} ${s.name} (${s.reason}): ${s.note}`);
  }
  return foldText({ ...r.fold, output: b === null ? null : `bundle ${b.dir}` }, colour, false) + joinLines(lines, colour) + '\n' + CAUTION.join('\n') + '\n';
}
