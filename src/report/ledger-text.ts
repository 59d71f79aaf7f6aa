// fold's report as text: a ledger with one line per normalization (folded into what, or kept and why, with
// the hint), a totals line, then the whole-model check per output, quantization readiness, storage, and the
// caution lines. Our own layout; nothing here compares operator counts side by side.
import type { FoldReport, CheckSummary, QuantRow, StorageSummary, EqualizedPair, Int8Simulation } from '../jobs/types.js';
import type { LedgerEntry, ProofFigures } from '../fold/types.js';
import { append, bytesText, CAUTION, cosineText, dbText, numText, plural, quantLayerText, ratioText, widest, joinLines } from './format.js';
import { paint, type Paint } from './paint.js';

const where = (graph: string) => (graph === 'main' ? '' : `  in ${graph}`);

/** One ledger line per entry, columns padded to the widest node and op of this report. */
export function ledgerLines(entries: ReadonlyArray<Pick<LedgerEntry, 'node' | 'op' | 'direction' | 'target' | 'reason' | 'hint' | 'effect' | 'graph'> & { status: string; proof?: ProofFigures }>, p: Paint): string[] {
  const nodeW = widest(entries, (e) => e.node);
  const opW = widest(entries, (e) => e.op);
  // (the marks painted once, and a list of the final length: a ledger has up to 10^5 lines)
  const kept = p.warn('kept     '), folded = p.good('folded   '), foldable = p.good('foldable ');
  const lines = new Array<string>(entries.length);
  for (let i = 0; i < entries.length; i++) {
    const e = entries[i]!;
    const head = `${e.node.padEnd(nodeW)}  ${e.op.padEnd(opW)}`;
    if (e.status === 'kept') {
      lines[i] = `  ${kept}${head}  ${p.warn(e.reason ?? 'kept')}: ${e.hint}${where(e.graph)}`;
      continue;
    }
    const mark = e.status === 'folded' ? folded : foldable;
    lines[i] = `  ${mark}${head}  into ${e.target ?? '?'} (${e.direction ?? '?'}): ${e.effect}${where(e.graph)}${e.proof ? `  ${proofText(e.proof)}` : ''}`;
  }
  return lines;
}

/** A fold's proof figures, compactly: the region's probe shape and its float64 errors. */
export function proofText(f: ProofFigures): string {
  return `[proof ${f.shape.join('x') || 'scalar'}: maxAbs ${numText(f.maxAbs)}, maxRel ${numText(f.maxRel)}]`;
}

/** The dims the probes took as 1 because nothing set them, one line each. */
export function assumedDimLines(dims: CheckSummary['assumedDims']): string[] {
  return dims.map((d) => `  probe dim ${d.symbol} = ${d.size} (no --dim given) for input ${d.inputs.join(', ')}`);
}

/** A list of names, the first ten of a long one (the JSON report holds them all). */
export function namesText(names: readonly string[], limit = 10): string {
  return names.length <= limit ? names.join(', ') : `${names.slice(0, limit).join(', ')} and ${names.length - limit} more`;
}

/** The coverage line, when some rewritten node never ran on any probe. */
export function coverageLines(c: CheckSummary['coverage'], p: Paint): string[] {
  if (c.missed.length === 0) return [];
  const extra = c.extraProbes ? ` (after ${plural(c.extraProbes, 'extra probe')})` : '';
  return [`  ${p.warn(`coverage ${c.executed}/${c.total}`)}: never executed by any probe${extra}: ${namesText(c.missed)}; ` +
    'the whole-model check says nothing about them (each fold was still proven on its own region)'];
}

export function checkLines(c: CheckSummary | null, p: Paint): string[] {
  if (c === null) return [`whole-model check: ${p.warn('not run')}: folds unproven; run pleat compare on the original and the folded model before shipping`];
  if (c.skipped !== null) {
    const lines = [`whole-model check: ${p.warn('skipped')} (${c.skipped.reason}): ${c.skipped.message}`, ...assumedDimLines(c.assumedDims)];
    if (c.strict) lines.push(`  ${p.bad('--strict')}: a skipped check fails the fold; nothing written`);
    return lines;
  }
  const cov = c.coverage.total ? `; coverage ${c.coverage.executed}/${c.coverage.total}` : '';
  const lines = [`whole-model check: ${c.status === 'passed' ? p.good('passed') : p.bad('FAILED')} (${plural(c.probes, 'probe')}, seed ${c.seed}${cov})`];
  lines.push(...assumedDimLines(c.assumedDims));
  const w = Math.max(0, ...c.outputs.map((o) => o.name.length));
  for (const o of c.outputs) {
    const verdict = o.passed ? p.good('pass') : p.bad('FAIL');
    if (o.problem && Number.isNaN(o.maxAbs)) { // not compared at all (missing output, shape differs)
      lines.push(`  ${o.name.padEnd(w)}  ${verdict}  ${o.problem}`);
      continue;
    }
    const note = o.observable === false ? `  ${p.warn('not observable')}: bit-identical on every probe although a rewritten node upstream ran` : '';
    lines.push(`  ${o.name.padEnd(w)}  ${verdict}  maxAbs ${numText(o.maxAbs)}  maxRel ${numText(o.maxRel)}  rms ${numText(o.rms)}  cosine ${cosineText(o.cosine)}${note}`);
    // (a gate may fail on a figure not shown above, such as the model-wide sqnr: the problem names it)
    if (!o.passed && o.problem) lines.push(`  ${' '.repeat(w)}  ${o.problem}`);
  }
  for (const g of c.gates) lines.push(`  gate: ${g}`);
  lines.push(...coverageLines(c.coverage, p));
  return lines;
}

export function quantLines(rows: readonly QuantRow[], thresholdDb: number, p: Paint): string[] {
  if (rows.length === 0) return [];
  const lines = [
    'quantization readiness (symmetric 8-bit weights, before -> after the fold; spread = widest / median channel range;',
    `  sqnr in dB per tensor, per channel, and the worst channel under one per-tensor scale; flagged below ${dbText(thresholdDb)} dB)`,
  ];
  const w = widest(rows, quantLayerText);
  const cw = widest(rows, (r) => plural(r.channels, 'channel'));
  for (const r of rows) {
    const flag = r.flagged ? `  ${p.warn('flagged')}: per-tensor 8-bit weights starve its narrow channels; use per-channel scales or --equalize` : '';
    const b = r.sqnrBefore, a = r.sqnrAfter;
    lines.push(`  ${quantLayerText(r).padEnd(w)}  ${plural(r.channels, 'channel').padEnd(cw)}  spread ${ratioText(r.spreadBefore)} -> ${ratioText(r.spreadAfter)}` +
      `  sqnr tensor ${dbText(b.tensor)} -> ${dbText(a.tensor)}, channel ${dbText(b.channel)} -> ${dbText(a.channel)}, worst channel ${dbText(b.worstChannel)} -> ${dbText(a.worstChannel)}${flag}`);
  }
  return lines;
}

export function equalizeLines(pairs: readonly EqualizedPair[], p: Paint): string[] {
  if (pairs.length === 0) return [];
  const lines = ['equalized pairs (cross-layer equalization; sqnr of the worst channel under one per-tensor 8-bit scale, dB, before -> after)'];
  const w = widest(pairs, (e) => `${e.first} -> ${e.second}`);
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
  const lines = [`storage ${s.store}: ${plural(s.tensorsConverted, 'tensor')} converted (${plural(s.castNodes, 'Cast node')} added), ${bytesText(s.bytesBefore)} -> ${bytesText(s.bytesAfter)} (${s.bytesBefore >= s.bytesAfter ? `${bytesText(s.bytesBefore - s.bytesAfter)} saved` : `grew by ${bytesText(s.bytesAfter - s.bytesBefore)}`})`];
  if (s.keptFloat32.length) lines.push(`  kept float32 (would overflow float16): ${s.keptFloat32.join(', ')}`);
  for (const k of s.skipped) lines.push(`  kept float32: ${k.tensor} (${k.reason})`);
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
  // (no copy of the list when it holds normalizations only, as it mostly does)
  const norms = r.normalizations.some((e) => e.kind === 'affine-step') ? r.normalizations.filter((e) => e.kind !== 'affine-step') : r.normalizations;
  let folded = 0;
  for (let i = 0; i < norms.length; i++) if (norms[i]!.status === 'folded') folded++;
  const kept = norms.length - folded;
  const also = r.normalizations.length - norms.length;
  const why = r.check?.status === 'skipped' ? '--strict: check skipped' : 'check failed';
  const dest = r.output ?? (r.failed ? p.bad(`nothing written (${why})`) : 'nothing written');
  const lines = [p.bold(`fold ${r.model} -> ${dest}`)];
  if (norms.length === 0) lines.push('  no normalizations found');
  append(lines, ledgerLines(norms, p), alsoLines(r.normalizations, 'also folded', p));
  const nodesRemoved = r.nodesBefore - r.nodesAfter;
  const bytesRemoved = r.bytesBefore - r.bytesAfter;
  const alsoText = also ? ` (and ${plural(also, 'affine step')} also folded)` : '';
  // a fold can also grow a model (cloned shared weights, Cast nodes of half-precision storage): say which way
  const nodes = nodesRemoved >= 0 ? `${plural(nodesRemoved, 'node')} removed` : `${plural(-nodesRemoved, 'node')} added`;
  const weights = bytesRemoved >= 0 ? `${bytesText(bytesRemoved)} of weights saved` : `weights grew by ${bytesText(-bytesRemoved)}`;
  lines.push(`  ${folded} folded, ${kept} kept${alsoText}; ${nodes} (${r.nodesBefore} -> ${r.nodesAfter}); ${weights} (${bytesText(r.bytesBefore)} -> ${bytesText(r.bytesAfter)})${cloneClause(r.normalizations)}`);
  append(lines, checkLines(r.check, p), quantLines(r.quantization, r.quantThresholdDb, p), equalizeLines(r.equalized, p), int8Lines(r.int8), storageLines(r.storage));
  if (r.staleSideFile) lines.push(`note: ${r.staleSideFile}, the side file of the model this run replaced, is left as it was; the new model keeps every weight inline and does not read it (remove it before shipping the folder)`);
  if (r.probesSaved) lines.push(`probes saved: ${plural(r.probesSaved.sets, 'set')} in ${r.probesSaved.dir} (ONNX backend test-data layout; float32-arithmetic outputs in ${r.probesSaved.dir}/float32)`);
  if (caution) lines.push(...CAUTION);
  return joinLines(lines, colour) + '\n';
}
