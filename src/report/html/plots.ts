// Plots as inline SVG: the spread of folded layers' channel ranges, and histograms of element differences.
// Both use a log axis; marks differ in shape and line style as well as colour.
import type { QuantRow } from '../../fold/quant.js';
import type { GateLimit } from '../../verify/gate.js';
import { REL_FLOOR, type DiffHistogram } from '../../verify/metrics.js';
import { numText, quantLayerText, ratioText } from '../format.js';
import { esc } from './escape.js';

const W = 600;
const f = (x: number) => (Math.round(x * 10) / 10).toString();

/** Decade tick labels between two exponents (log10 units). */
function decades(lo: number, hi: number, every = 1): number[] {
  const out: number[] = [];
  for (let e = Math.ceil(lo); e <= Math.floor(hi); e++) if (e % every === 0) out.push(e);
  return out;
}

/** One row per folded layer: spread before (hollow circle) and after (filled dot); flagged layers marked. */
export function spreadPlot(rows: readonly QuantRow[], key: string): string {
  const labelW = Math.min(220, 12 + 7.3 * Math.max(4, ...rows.map((r) => quantLayerText(r).length)));
  const left = labelW + 8, right = 86, top = 28, rowH = 26;
  const h = top + rows.length * rowH + 30;
  const finite = rows.flatMap((r) => [r.spreadBefore, r.spreadAfter]).filter((x) => Number.isFinite(x) && x > 0);
  const hiExp = Math.max(1, Math.log10(Math.max(1, ...finite)) + 0.3);
  const x = (v: number) => left + (Math.min(hiExp, Math.max(0, Number.isFinite(v) ? Math.log10(Math.max(v, 1)) : hiExp)) / hiExp) * (W - left - right);
  const p: string[] = [`<svg class="plot spread" viewBox="0 0 ${W} ${f(h)}" role="img" aria-labelledby="${key}-t">`,
    `<title id="${key}-t">Spread of per-output-channel weight ranges (widest / median) before and after folding, per folded layer</title>`];
  const axisY = top + rows.length * rowH + 4;
  for (const e of decades(0, hiExp)) {
    p.push(`<line class="grid" x1="${f(x(10 ** e))}" x2="${f(x(10 ** e))}" y1="${top - 6}" y2="${f(axisY)}"/>`,
      `<text class="tick" x="${f(x(10 ** e))}" y="${f(axisY + 14)}">${10 ** e}</text>`);
  }
  rows.forEach((r, i) => {
    const y = top + i * rowH + rowH / 2;
    const xb = x(r.spreadBefore), xa = x(r.spreadAfter);
    p.push(`<g class="row${r.flagged ? ' flagged' : ''}"><text class="name" x="${f(labelW)}" y="${f(y + 4)}">${esc(quantLayerText(r))}</text>`,
      `<line class="move" x1="${f(xb)}" x2="${f(xa)}" y1="${f(y)}" y2="${f(y)}"/>`,
      `<circle class="before" cx="${f(xb)}" cy="${f(y)}" r="5"><title>before: ${ratioText(r.spreadBefore)}</title></circle>`,
      `<circle class="after" cx="${f(xa)}" cy="${f(y)}" r="5"><title>after: ${ratioText(r.spreadAfter)}</title></circle>`);
    if (r.flagged) p.push(`<text class="flag" x="${f(W - right + 8)}" y="${f(y + 4)}">▲ flagged</text>`);
    p.push('</g>');
  });
  p.push(`<text class="axis-label" x="${f(left)}" y="${f(h - 2)}">spread (log scale) · ○ before fold · ● after fold · ▲ flagged (8-bit SQNR)</text>`, '</svg>');
  return p.join('');
}

/** The absolute difference bounds a gate implies: maxAbs gives one line; maxRel a band (see histogramPlot). */
export function absoluteBounds(limits: readonly GateLimit[], peak: number): Array<{ metric: string; lo: number; hi: number; limit: number }> {
  return limits.map((l) => l.metric === 'maxAbs' ? { metric: l.metric, lo: l.limit, hi: l.limit, limit: l.limit }
    : { metric: l.metric, lo: l.limit * REL_FLOOR * peak, hi: l.limit * peak, limit: l.limit });
}

/**
 * Counts of |candidate - reference| in log-spaced bins, with the gate drawn: a maxAbs bound is one dashed line;
 * a maxRel bound r is a hatched band from r * REL_FLOOR * peak (an element below it passes whatever its size)
 * to r * peak (an element above it fails whatever its size).
 */
export function histogramPlot(h: DiffHistogram, limits: readonly GateLimit[], key: string, title: string): string {
  const bpd = h.binsPerDecade;
  const bounds = absoluteBounds(limits, h.peak).filter((b) => b.hi > 0 && Number.isFinite(b.hi));
  const exps = [...bounds.flatMap((b) => [Math.log10(b.lo > 0 ? b.lo : b.hi), Math.log10(b.hi)])];
  if (h.counts.length) exps.push(h.first / bpd, (h.first + h.counts.length) / bpd);
  const lo = Math.floor(Math.min(...exps, -8)) - 1, hi = Math.ceil(Math.max(...exps, lo + 4)) + 1;
  const left = 52, right = 14, top = 34, bottom = 40, plotH = 130;
  const H = top + plotH + bottom;
  const x = (e: number) => left + ((e - lo) / (hi - lo)) * (W - left - right);
  const max = Math.max(1, ...h.counts);
  const y = (c: number) => top + plotH - (c / max) * plotH;
  const p: string[] = [`<svg class="plot histogram" viewBox="0 0 ${W} ${H}" role="img" aria-labelledby="${key}-t">`,
    `<title id="${key}-t">${esc(title)}</title>`,
    `<defs><pattern id="${key}-hatch" width="6" height="6" patternUnits="userSpaceOnUse" patternTransform="rotate(45)"><line x1="0" y1="0" x2="0" y2="6" class="hatch"/></pattern></defs>`];
  for (const b of bounds) {
    if (b.lo < b.hi) {
      p.push(`<rect class="band" x="${f(x(Math.log10(b.lo)))}" y="${top}" width="${f(x(Math.log10(b.hi)) - x(Math.log10(b.lo)))}" height="${plotH}" fill="url(#${key}-hatch)"/>`);
    }
  }
  const step = hi - lo > 16 ? 4 : hi - lo > 8 ? 2 : 1;
  for (const e of decades(lo, hi, step)) {
    p.push(`<line class="grid" x1="${f(x(e))}" x2="${f(x(e))}" y1="${top}" y2="${top + plotH}"/>`,
      `<text class="tick" x="${f(x(e))}" y="${top + plotH + 14}">1e${e}</text>`);
  }
  h.counts.forEach((c, i) => {
    if (!c) return;
    const e0 = (h.first + i) / bpd, e1 = (h.first + i + 1) / bpd;
    p.push(`<rect class="bar" x="${f(x(e0) + 0.5)}" y="${f(y(c))}" width="${f(x(e1) - x(e0) - 1)}" height="${f(top + plotH - y(c))}"><title>${c} element${c === 1 ? '' : 's'} in [${numText(10 ** e0)}, ${numText(10 ** e1)})</title></rect>`);
  });
  p.push(`<line class="axis" x1="${left}" x2="${W - right}" y1="${top + plotH}" y2="${top + plotH}"/>`,
    `<text class="tick end" x="${left - 4}" y="${top + 4}">${max}</text>`, `<text class="tick end" x="${left - 4}" y="${top + plotH}">0</text>`);
  let labelY = top - 20;
  for (const b of bounds) {
    for (const v of b.lo < b.hi ? [b.lo, b.hi] : [b.hi]) {
      p.push(`<line class="limit" x1="${f(x(Math.log10(v)))}" x2="${f(x(Math.log10(v)))}" y1="${top - 6}" y2="${top + plotH}"/>`);
    }
    const text = b.metric === 'maxAbs' ? `gate: maxAbs ≤ ${numText(b.limit)} (dashed)`
      : `gate: maxRel ≤ ${numText(b.limit)}: hatched band ${numText(b.lo)} to ${numText(b.hi)}`;
    p.push(`<text class="limit-label" x="${left}" y="${labelY}">${esc(text)}</text>`);
    labelY += 12;
  }
  p.push(`<text class="axis-label" x="${left}" y="${H - 4}">|difference| per element (log scale); bar height: elements</text>`, '</svg>');
  return p.join('');
}
