// fold's report as text: a ledger with one line per normalization (folded into what, or kept and why, with
// the hint), a totals line, then the whole-model check per output, quantization readiness, storage, and the
// caution lines. Our own layout; nothing here compares operator counts side by side.
import type { FoldReport, CheckSummary, QuantRow, StorageSummary, EqualizedPair, Int8Simulation } from '../jobs/types.js';
import type { LedgerEntry } from '../fold/types.js';
import { bytesText, CAUTION, cosineText, dbText, numText, plural, ratioText } from './format.js';
import { paint, type Paint } from './paint.js';

const where = (graph: string) => (graph === 'main' ? '' : `  in ${graph}`);

/** One ledger line per entry, columns padded to the widest node and op of this report. */
export function ledgerLines(entries: ReadonlyArray<Pick<LedgerEntry, 'node' | 'op' | 'direction' | 'target' | 'reason' | 'hint' | 'graph'> & { status: string }>, p: Paint): string[] {
  const nodeW = Math.max(0, ...entries.map((e) => e.node.length));
  const opW = Math.max(0, ...entries.map((e) => e.op.length));
  return entries.map((e) => {
    const head = `${e.node.padEnd(nodeW)}  ${e.op.padEnd(opW)}`;
    if (e.status === 'kept') {
      return `  ${p.warn('kept     ')}${head}  ${p.warn(e.reason ?? 'kept')}: ${e.hint}${where(e.graph)}`;
    }
    const mark = e.status === 'folded' ? p.good('folded   ') : p.good('foldable ');
    return `  ${mark}${head}  into ${e.target ?? '?'} (${e.direction ?? '?'}): ${e.hint}${where(e.graph)}`;
  });
}

export function checkLines(c: CheckSummary | null, p: Paint): string[] {
  if (c === null) return [`whole-model check: ${p.warn('not run')}: folds unproven; run pleat compare on the original and the folded model before shipping`];
  if (c.skipped !== null) return [`whole-model check: ${p.warn('skipped')}: ${c.skipped}`];
  const lines = [`whole-model check: ${c.passed ? p.good('passed') : p.bad('FAILED')} (${plural(c.probes, 'probe')}, seed ${c.seed})`];
  const w = Math.max(0, ...c.outputs.map((o) => o.name.length));
  for (const o of c.outputs) {
    const verdict = o.passed ? p.good('pass') : p.bad('FAIL');
    if (o.problem && Number.isNaN(o.maxAbs)) { // not compared at all (missing output, shape differs)
      lines.push(`  ${o.name.padEnd(w)}  ${verdict}  ${o.problem}`);
      continue;
    }
    lines.push(`  ${o.name.padEnd(w)}  ${verdict}  maxAbs ${numText(o.maxAbs)}  maxRel ${numText(o.maxRel)}  rms ${numText(o.rms)}  cosine ${cosineText(o.cosine)}`);
  }
  for (const g of c.gates) lines.push(`  gate: ${g}`);
  return lines;
}

export function quantLines(rows: readonly QuantRow[], thresholdDb: number, p: Paint): string[] {
  if (rows.length === 0) return [];
  const lines = [
    'quantization readiness (symmetric 8-bit weights, before -> after the fold; spread = widest / median channel range;',
    `  sqnr in dB per tensor, per channel, and the worst channel under one per-tensor scale; flagged below ${dbText(thresholdDb)} dB)`,
  ];
  const w = Math.max(0, ...rows.map((r) => r.target.length));
  const cw = Math.max(0, ...rows.map((r) => plural(r.channels, 'channel').length));
  for (const r of rows) {
    const flag = r.flagged ? `  ${p.warn('flagged')}: per-tensor 8-bit weights starve its narrow channels; use per-channel scales or --equalize` : '';
    const b = r.sqnrBefore, a = r.sqnrAfter;
    lines.push(`  ${r.target.padEnd(w)}  ${plural(r.channels, 'channel').padEnd(cw)}  spread ${ratioText(r.spreadBefore)} -> ${ratioText(r.spreadAfter)}` +
      `  sqnr tensor ${dbText(b.tensor)} -> ${dbText(a.tensor)}, channel ${dbText(b.channel)} -> ${dbText(a.channel)}, worst channel ${dbText(b.worstChannel)} -> ${dbText(a.worstChannel)}${flag}`);
  }
  return lines;
}

export function equalizeLines(pairs: readonly EqualizedPair[], p: Paint): string[] {
  if (pairs.length === 0) return [];
  const lines = ['equalized pairs (cross-layer equalization; sqnr of the worst channel under one per-tensor 8-bit scale, dB, before -> after)'];
  const w = Math.max(0, ...pairs.map((e) => `${e.first} -> ${e.second}`.length));
  for (const e of pairs) {
    const pair = `${e.first} -> ${e.second}`.padEnd(w);
    const via = e.through.length ? `  through ${e.through.join(', ')}` : '';
    if (e.status === 'equalized' && e.sqnr) {
      const q = e.sqnr;
      lines.push(`  ${p.good('equalized')}  ${pair}  ${plural(e.channels, 'channel')}  ${e.first} ${dbText(q.firstBefore.worstChannel)} -> ${dbText(q.firstAfter.worstChannel)}, ` +
        `${e.second} ${dbText(q.secondBefore.worstChannel)} -> ${dbText(q.secondAfter.worstChannel)}${via}${where(e.graph)}`);
    } else {
      lines.push(`  ${p.warn('refused  ')}  ${pair}  ${p.warn(e.reason ?? 'refused')}: ${e.hint}${where(e.graph)}`);
    }
  }
  return lines;
}

export function int8Lines(s: Int8Simulation | null): string[] {
  if (s === null) return [];
  const lines = [`8-bit weights, ${s.granularity === 'tensor' ? 'one scale per tensor' : 'one scale per output channel'} ` +
    `(${plural(s.probes, 'probe')}; each model with its Conv/Gemm/MatMul weights rounded, against the unrounded original in float64; no gate)`];
  const w = Math.max(0, ...s.outputs.map((o) => o.name.length));
  const fig = (f: { maxAbs: number; maxRel: number; cosine: number } | null) =>
    f ? `maxAbs ${numText(f.maxAbs)}  maxRel ${numText(f.maxRel)}  cosine ${cosineText(f.cosine)}` : 'not compared';
  for (const o of s.outputs) {
    if (o.problem) { lines.push(`  ${o.name.padEnd(w)}  ${o.problem}`); continue; }
    lines.push(`  ${o.name.padEnd(w)}  original: ${fig(o.original)}`, `  ${''.padEnd(w)}  folded:   ${fig(o.folded)}`);
  }
  return lines;
}

export function storageLines(s: StorageSummary | null): string[] {
  if (s === null) return [];
  const lines = [`storage ${s.store}: ${plural(s.tensorsConverted, 'tensor')} converted, ${bytesText(s.bytesBefore)} -> ${bytesText(s.bytesAfter)} (${bytesText(Math.max(0, s.bytesBefore - s.bytesAfter))} saved)`];
  if (s.keptFloat32.length) lines.push(`  kept float32 (would overflow float16): ${s.keptFloat32.join(', ')}`);
  return lines;
}

/**
 * The other constant affine steps (kind affine-step: scalar Mul/Add/Sub/Div, e.g. inside activations), listed
 * after the normalizations under their own heading; they are never kept.
 */
export function alsoLines(entries: ReadonlyArray<Parameters<typeof ledgerLines>[0][number] & { kind: string }>, heading: string, p: Paint): string[] {
  const also = entries.filter((e) => e.kind === 'affine-step');
  return also.length ? [`  ${heading} (constant affine steps that are not normalizations):`, ...ledgerLines(also, p).map((l) => `  ${l}`)] : [];
}

/** Weight bytes --clone-shared copies added, as a clause for the totals line ('' when none). */
export function cloneClause(entries: ReadonlyArray<{ cloneBytes: number }>): string {
  const n = entries.filter((e) => e.cloneBytes > 0);
  const bytes = n.reduce((a, e) => a + e.cloneBytes, 0);
  return n.length ? `; ${plural(n.length, 'layer')} cloned for --clone-shared (+${bytesText(bytes)} of weights)` : '';
}

export function foldText(r: FoldReport, colour = false, caution = true): string {
  const p = paint(colour);
  const norms = r.normalizations.filter((e) => e.kind !== 'affine-step');
  const folded = norms.filter((e) => e.status === 'folded').length;
  const kept = norms.length - folded;
  const also = r.normalizations.length - norms.length;
  const dest = r.output ?? (r.failed ? p.bad('nothing written (check failed)') : 'nothing written');
  const lines = [p.bold(`fold ${r.model} -> ${dest}`)];
  if (norms.length === 0) lines.push('  no normalizations found');
  lines.push(...ledgerLines(norms, p), ...alsoLines(r.normalizations, 'also folded', p));
  const nodesRemoved = r.nodesBefore - r.nodesAfter;
  const bytesRemoved = r.bytesBefore - r.bytesAfter;
  const alsoText = also ? ` (and ${plural(also, 'affine step')} also folded)` : '';
  lines.push(`  ${folded} folded, ${kept} kept${alsoText}; ${plural(nodesRemoved, 'node')} removed (${r.nodesBefore} -> ${r.nodesAfter}); ` +
    `${bytesText(Math.max(0, bytesRemoved))} of weights saved (${bytesText(r.bytesBefore)} -> ${bytesText(r.bytesAfter)})${cloneClause(r.normalizations)}`);
  lines.push(...checkLines(r.check, p), ...quantLines(r.quantization, r.quantThresholdDb, p), ...equalizeLines(r.equalized, p), ...int8Lines(r.int8), ...storageLines(r.storage));
  if (caution) lines.push(...CAUTION);
  return lines.join('\n') + '\n';
}
