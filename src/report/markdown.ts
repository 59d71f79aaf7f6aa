// Reports as Markdown for a pull-request comment: a heading with the verdict, one summary line, a table of
// the normalizations (kept ones first, since those are what a reviewer asks about), flagged quantization rows,
// and the caution as a quote.
import type { AuditReport, FoldReport } from '../jobs/types.js';
import type { CompareReport } from '../verify/compare.js';
import { outputSkipped } from '../verify/status.js';
import type { ProofFigures } from '../fold/types.js';
import { append, bytesText, CAUTION, cosineText, dbText, numText, ratioText, visible } from './format.js';

/**
 * Plain text safe inside a table cell: pipes escaped, brackets escaped (a name in a hint written as a link or an
 * image stays text), HTML-looking text neutralised (`&` too, so a name holding
 * `&lt;` does not read as `<`), line breaks flattened. Never applied to a code span: a code span decodes no entity,
 * so `&lt;` there showed as written.
 */
export function cell(s: string): string {
  return visible(s.replace(/\\/g, '\\\\').replace(/\|/g, '\\|').replace(/[[\]]/g, '\\$&').replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/[\r\n]+/g, ' '));
}
/** A name as a code span: shown as it is (backticks as ', line breaks flattened). */
const code = (s: string) => `\`${visible(s.replace(/`/g, "'").replace(/[\r\n]+/g, ' '))}\``;
/** The same inside a table cell, where a pipe must be escaped even within a code span (GFM tables). */
const codeInCell = (s: string) => code(s).replace(/\|/g, '\\|');

interface Row { node: string; op: string; kind: string; status: string; direction: string | null; target: string | null; reason: string | null; hint: string | null; graph: string; proof?: ProofFigures }

const proofCell = (f: ProofFigures) => `; proof on ${f.shape.join('x') || 'scalar'}: maxAbs ${numText(f.maxAbs)}, maxRel ${numText(f.maxRel)}`;

/** The other constant affine steps, in one line after the table (they are never kept). */
function alsoLine(rows: readonly Row[], verb: string): string[] {
  const also = rows.filter((e) => e.kind === 'affine-step');
  if (!also.length) return [];
  return ['', `Also ${verb} (constant affine steps that are not normalizations): ` +
    also.map((e) => `${code(e.node)} (${e.op}) into ${code(e.target ?? '?')}`).join(', ') + '.'];
}

function table(all: readonly Row[]): string[] {
  const rows = all.filter((e) => e.kind !== 'affine-step');
  if (rows.length === 0) return ['No normalizations found.'];
  const order = [...rows].sort((x, y) => Number(y.status === 'kept') - Number(x.status === 'kept'));
  const out = ['| normalization | op | status | detail |', '|---|---|---|---|'];
  for (const e of order) {
    const where = e.graph === 'main' ? '' : ` (in ${codeInCell(e.graph)})`;
    const detail = e.status === 'kept' ? `${codeInCell(e.reason ?? 'kept')}: ${cell(e.hint ?? '')}`
      : `into ${codeInCell(e.target ?? '?')} (${cell(e.direction ?? '?')})${e.proof ? proofCell(e.proof) : ''}`;
    out.push(`| ${codeInCell(e.node)}${where} | ${cell(e.op)} | ${e.status} | ${detail} |`);
  }
  return out;
}

/** The weight bytes --clone-shared copies added, as a clause ('' when nothing was cloned). */
function cloneNote(entries: ReadonlyArray<{ cloneBytes: number }>): string {
  const cloned = entries.filter((e) => e.cloneBytes > 0);
  return cloned.length ? ` (${cloned.length} layer(s) cloned for --clone-shared: +${bytesText(cloned.reduce((a, e) => a + e.cloneBytes, 0))})` : '';
}

const caution = () => ['', `> ${CAUTION.join(' ')}`];

export function foldMarkdown(r: FoldReport): string {
  const norms = r.normalizations.filter((e) => e.kind !== 'affine-step');
  const folded = norms.filter((e) => e.status === 'folded').length;
  const verdict = r.failed ? 'failed: nothing written' : 'done';
  const out = [`### pleat fold ${code(r.model)}: ${verdict}`, ''];
  const c = r.check;
  const cov = c && c.coverage.total ? `, coverage ${c.coverage.executed}/${c.coverage.total}` : '';
  const check = c === null ? 'not run' : c.skipped !== null ? `skipped (${code(c.skipped.reason)}: ${cell(c.skipped.message)})${c.strict ? ', which fails under `--strict`' : ''}`
    : `${c.status === 'passed' ? 'passed' : '**failed**'} on ${c.outputs.length} output(s), worst maxAbs ${numText(Math.max(0, ...c.outputs.map((o) => o.maxAbs)))}${cov}`;
  out.push(`**${folded} folded, ${norms.length - folded} kept**; nodes ${r.nodesBefore} → ${r.nodesAfter}; ` +
    `weights ${bytesText(r.bytesBefore)} → ${bytesText(r.bytesAfter)}${cloneNote(r.normalizations)}; whole-model check ${check}.`, '');
  if (c) {
    const notes: string[] = [];
    for (const d of c.assumedDims) notes.push(`Probe dim ${code(d.symbol)} = ${d.size} (no \`--dim\` given).`);
    if (c.coverage.missed.length) notes.push(`Coverage ${c.coverage.executed}/${c.coverage.total}: no probe executed ${c.coverage.missed.slice(0, 10).map(code).join(', ')}${c.coverage.missed.length > 10 ? ` and ${c.coverage.missed.length - 10} more` : ''} (each fold was proven on its own region).`);
    for (const o of c.outputs) if (o.observable === false) notes.push(`Output ${code(o.name)}: not observable, bit-identical on every probe although a rewritten node upstream ran.`);
    if (notes.length) out.push(...notes, '');
  }
  append(out, table(r.normalizations), alsoLine(r.normalizations, 'folded'));
  const flagged = r.quantization.filter((q) => q.flagged);
  if (flagged.length) {
    out.push('', `Quantization readiness: ${flagged.length} layer(s) flagged for per-tensor 8-bit weights ` +
      `(worst channel below ${dbText(r.quantThresholdDb)} dB SQNR): ` +
      flagged.map((q) => `${code(q.target)}${q.copy === undefined ? '' : ` → copy ${code(q.copy)}`} worst channel ${dbText(q.sqnrBefore.worstChannel)} → ${dbText(q.sqnrAfter.worstChannel)} dB, spread ${ratioText(q.spreadBefore)} → ${ratioText(q.spreadAfter)}`).join(', ') + '.');
  }
  const eq = r.equalized.filter((p) => p.status === 'equalized');
  if (r.equalized.length) {
    out.push('', `Equalization: ${eq.length} of ${r.equalized.length} layer pair(s) equalized` +
      (eq.length ? ': ' + eq.map((p) => `${code(p.first)} → ${code(p.second)}`).join(', ') : '') + '.');
  }
  if (r.int8) {
    const worst = (k: 'original' | 'folded') => Math.min(...r.int8!.outputs.map((o) => o[k]?.cosine ?? NaN));
    out.push('', `8-bit weights (${r.int8.granularity === 'tensor' ? 'per tensor' : 'per channel'}): lowest output cosine ${cosineText(worst('original'))} for the original, ${cosineText(worst('folded'))} for the folded model.`);
  }
  if (r.storage) out.push('', `Half-precision storage: ${r.storage.tensorsConverted} tensor(s), ${bytesText(r.storage.bytesBefore)} → ${bytesText(r.storage.bytesAfter)}.`);
  out.push(...caution());
  return out.join('\n') + '\n';
}

export function auditMarkdown(r: AuditReport): string {
  const verdict = r.failed ? 'failed (--fail-on kept)' : 'done';
  const out = [`### pleat audit ${code(r.model)}: ${verdict}`, '', `**${r.foldable} foldable, ${r.kept} kept.**`, ''];
  append(out, table(r.normalizations), alsoLine(r.normalizations, 'foldable')); // no probe caution: audit runs no probes
  return out.join('\n') + '\n';
}

export function compareMarkdown(r: CompareReport, a: string, b: string): string {
  const out = [`### pleat compare ${code(a)} with ${code(b)}: ${r.status}`, '',
    `${r.probes} probe(s), seed ${r.seed}.` + (r.skipped ? ` Skipped (${code(r.skipped.reason)}): ${cell(r.skipped.message)}` : '') +
      (r.halfPrecisionWeights.a + r.halfPrecisionWeights.b > 0 ? ' Weights stored in half precision: float32 outputs judged by the float16 gate.' : ''), '',
    ...r.assumedDims.map((d) => `Probe dim ${code(d.symbol)} = ${d.size} (no \`--dim\` given).`),
    '| output | result | maxAbs | maxRel | cosine |', '|---|---|---|---|---|'];
  for (const o of r.outputs) {
    const m = o.metrics;
    const result = o.passed ? 'pass' : outputSkipped(o.status) ? cell(`skipped: ${o.problem ?? 'no elements'}`) : cell(`**fail**: ${o.problem ?? o.status}`);
    out.push(`| ${codeInCell(o.name)} | ${result} | ${m ? numText(m.maxAbs) : ''} | ${m ? numText(m.maxRel) : ''} | ${m ? cosineText(m.cosine) : ''} |`);
  }
  out.push(...caution());
  return out.join('\n') + '\n';
}

/** A model a batch could not process. */
export function errorMarkdown(command: string, model: string, message: string): string {
  return `### pleat ${command} ${code(model)}: error\n\n${message}\n`;
}
