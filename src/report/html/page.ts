// The HTML report: one self-contained page (inline CSS and SVG, one line of script that opens collapsed
// sections for printing; nothing fetched from anywhere). Sections: overview, ledger, one card per
// normalization (affine steps in their own collapsed section), the whole-model check with a histogram per
// output, and quantization readiness. Every figure the page shows carries `data-figure` (its path in the JSON
// report of the same run) and `data-value` (the JSON value), so a test can hold the page to the JSON.
// Fields other branches add (per-fold `proof`, check `status`, entry `kind`) are shown when the report has them.
import type { AuditReport, CheckSummary, FoldReport, OutputCheck, RunFigures } from '../../jobs/types.js';
import type { Sketch } from '../../fold/sketch.js';
import type { CompareReport } from '../../verify/compare.js';
import { outputSkipped } from '../../verify/status.js';
import type { GateLimit } from '../../verify/gate.js';
import type { DiffHistogram } from '../../verify/metrics.js';
import { bytesText, CAUTION, cosineText, dbText, numText, ratioText } from '../format.js';
import { drawView } from './drawing.js';
import { esc } from './escape.js';
import { histogramPlot, spreadPlot } from './plots.js';
import { CSS } from './style.js';

type Entry = (FoldReport['normalizations'][number] | AuditReport['normalizations'][number]) & Record<string, unknown>;

const SHAPES: Record<string, string> = { folded: '✔', foldable: '◇', kept: '■', passed: '✔', failed: '✘', skipped: '○', equalized: '✔', refused: '■' };

export const badge = (status: string) => `<span class="badge s-${esc(status)}">${SHAPES[status] ?? '•'} ${esc(status)}</span>`;

/** A JSON value as the JSON report writes it (non-finite numbers as strings). */
const jsonValue = (v: number | string | boolean) => (typeof v === 'number' && !Number.isFinite(v) ? String(v) : String(v));

/** A figure of the report: visible text, plus its JSON path and value for readers and tests. */
function fig(path: string, value: number | string | boolean, text: string): string {
  return `<span data-figure="${esc(path)}" data-value="${esc(jsonValue(value))}">${esc(text)}</span>`;
}

/** A tally the page derives from the JSON (e.g. kept normalizations by reason), marked so a test can recount it. */
const tally = (what: string, n: number) => `<span data-count="${esc(what)}">${n}</span>`;

const tile = (title: string, body: string, cls = '') => `<div class="tile${cls}"><dt>${esc(title)}</dt><dd>${body}</dd></div>`;

function runTile(run: RunFigures | undefined, at: string): string {
  if (!run) return tile('run', 'time and peak memory not recorded (add <code>--run-figures</code>)');
  return tile('run', `${fig(`${at}run.seconds`, run.seconds, `${run.seconds.toFixed(2)} s`)}, peak memory ${fig(`${at}run.peakMemoryBytes`, run.peakMemoryBytes, bytesText(run.peakMemoryBytes))}`);
}

const shaTile = (sha: string | undefined, at: string, title = 'SHA-256') =>
  (sha ? tile(title, `<code>${fig(at, sha, sha)}</code>`) : '');
/** The side files' digest (the README says how it is made from each file's SHA-256). */
const EXTERNAL_TITLE = 'SHA-256 of external data';

/** Counts by status and, for kept ones, by reason. */
function countsTile(entries: readonly Entry[]): string {
  const by = (key: (e: Entry) => string | null) => {
    const m = new Map<string, number>();
    for (const e of entries) { const k = key(e); if (k !== null) m.set(k, (m.get(k) ?? 0) + 1); }
    return [...m].sort(([a], [b]) => (a < b ? -1 : a > b ? 1 : 0));
  };
  const statuses = by((e) => e.status).map(([s, n]) => `${badge(s)} ${tally(`status:${s}`, n)}`).join(', ');
  const reasons = by((e) => e.reason).map(([r, n]) => `${tally(`reason:${r}`, n)} <code>${esc(r)}</code>`).join(', ');
  return tile('normalizations', `${tally('entries', entries.length)} in all${statuses ? `: ${statuses}` : ''}${reasons ? `<br>kept because: ${reasons}` : ''}`);
}

const isAffineStep = (e: Entry) => 'kind' in e && e.kind === 'affine-step';

function checkStatus(c: CheckSummary): string {
  const s = (c as CheckSummary & { status?: unknown }).status;
  return typeof s === 'string' ? s : c.skipped !== null ? 'skipped' : c.passed ? 'passed' : 'failed';
}

function checkTile(c: CheckSummary | null, at: string): string {
  if (c === null) return tile('whole-model check', `${badge('skipped')} not run (<code>--unproven</code>)`);
  const status = checkStatus(c);
  const detail = c.skipped !== null ? `<code>${esc(c.skipped.reason)}</code>: ${esc(c.skipped.message)}`
    : `${fig(`${at}check.probes`, c.probes, String(c.probes))} probe${c.probes === 1 ? '' : 's'}, seed ${fig(`${at}check.seed`, c.seed, String(c.seed))}; gate ${c.gates.map((g) => `<code>${esc(g)}</code>`).join(', ')}`;
  return tile('whole-model check', `${badge(status)} ${detail}`);
}

// ---- ledger and cards ---------------------------------------------------------------------------------

const where = (e: Entry) => (e.graph === 'main' ? '' : ` <span class="sub">in <code>${esc(e.graph)}</code></span>`);

function ledger(entries: readonly Entry[], pre: string): string {
  if (entries.length === 0) return '<p>No normalizations found.</p>';
  const rows = entries.map((e, i) => {
    const detail = e.status === 'kept' ? `<code>${esc(e.reason ?? 'kept')}</code>` : `into <code>${esc(e.target ?? '?')}</code> (${esc(e.direction ?? '?')})`;
    return `<tr id="${pre}row-${i}"><td>${i + 1}</td><td>${badge(e.status)}</td><td><a href="#${pre}card-${i}"><code>${esc(e.node)}</code></a>${where(e)}</td><td>${esc(e.op)}</td><td>${detail}</td><td>${esc(e.hint ?? e.effect ?? '')}</td></tr>`;
  });
  return `<div class="scroll"><table><thead><tr><th>#</th><th>status</th><th>normalization (card)</th><th>op</th><th>into, or why kept</th><th>hint, or what the fold does</th></tr></thead><tbody>${rows.join('')}</tbody></table></div>`;
}

/** Any object of figures (e.g. the per-fold proof): numbers as figures, arrays joined with x. */
function figureList(obj: Record<string, unknown>, at: string): string {
  return Object.entries(obj).map(([k, v]) => {
    const text = typeof v === 'number' ? fig(`${at}.${k}`, v, numText(v))
      : Array.isArray(v) ? esc(v.join(' x ')) : esc(String(v));
    return `<code>${esc(k)}</code> ${text}`;
  }).join(', ');
}

function card(e: Entry, i: number, sketch: Sketch | undefined, pre: string, at: string): string {
  const key = `${pre}card-${i}`;
  const rows: string[] = [`<dt>op</dt><dd>${esc(e.op)}</dd>`];
  if (e.graph !== 'main') rows.push(`<dt>graph</dt><dd><code>${esc(e.graph)}</code></dd>`);
  if (e.status === 'kept') rows.push(`<dt>reason</dt><dd><code>${esc(e.reason ?? '')}</code></dd>`);
  else {
    // a fold into several readers (fan-out) names each of them in `targets`
    const targets = Array.isArray(e.targets) && e.targets.length > 1 ? (e.targets as string[]) : [e.target ?? '?'];
    rows.push(`<dt>into</dt><dd>${targets.map((t) => `<code>${esc(t)}</code>`).join(', ')} (${esc(e.direction ?? '?')})</dd>`);
  }
  rows.push(`<dt>${e.status === 'kept' ? 'hint' : 'does'}</dt><dd>${esc(e.hint ?? e.effect ?? '')}</dd>`);
  if ('proof' in e && e.proof && typeof e.proof === 'object') {
    rows.push(`<dt>proof</dt><dd>${figureList(e.proof as Record<string, unknown>, `${at}normalizations.${i}.proof`)}</dd>`);
  }
  let drawings = '';
  if (sketch) {
    const views = [drawView(sketch.before, `${key}-b`, `Neighbourhood of ${e.node} ${sketch.after ? 'before the fold' : 'in the model'}`)];
    const note = (v: Sketch['before']) => (v.omitted ? ` (${v.omitted} more neighbours not drawn)` : '');
    drawings = `<div class="pair"><figure>${views[0]}<figcaption>${sketch.after ? 'before' : 'neighbourhood, two hops'}${note(sketch.before)}</figcaption></figure>`;
    if (sketch.after) drawings += `<figure>${drawView(sketch.after, `${key}-a`, `Neighbourhood of ${typeof e.copy === 'string' ? `${e.copy} (the copy of ${e.target ?? ''} this norm folded into)` : e.target ?? ''} after the fold`)}<figcaption>after${note(sketch.after)}</figcaption></figure>`;
    drawings += '</div>';
  }
  return `<article class="card s-${esc(e.status)}" id="${key}" tabindex="0" aria-labelledby="${key}-h">` +
    `<h3 id="${key}-h">${badge(e.status)} <code>${esc(e.node)}</code></h3><dl>${rows.join('')}</dl>${drawings}` +
    `<a class="back" href="#${pre}row-${i}">back to ledger row ${i + 1}</a></article>`;
}

const LEGEND = '<p class="legend">In each drawing: thick outline, the normalization; double outline, the layer it folds into; dashed outline and "pads input", a node that pads its input. Arrows follow the data.</p>';

function cards(entries: readonly Entry[], sketches: readonly Sketch[] | undefined, pre: string, at: string): string {
  const find = (e: Entry) => sketches?.find((s) => s.node === e.node && s.graph === e.graph);
  const list = (pick: (e: Entry) => boolean) => entries.map((e, i) => (pick(e) ? card(e, i, find(e), pre, at) : '')).join('');
  const norms = list((e) => !isAffineStep(e));
  const steps = entries.filter(isAffineStep).length;
  let out = `<h2 id="${pre}cards">Normalizations, one card each</h2>${sketches ? LEGEND : ''}<div class="cards" id="${pre}norm-cards">${norms}</div>`;
  if (steps) out += `<details id="${pre}affine"><summary>Affine steps also folded (${steps})</summary><div class="cards">${list(isAffineStep)}</div></details>`;
  return out;
}

// ---- plots ----------------------------------------------------------------------------------------------

function outputBlock(name: string, figs: string, h: DiffHistogram | undefined, limits: readonly GateLimit[], key: string, what: string): string {
  const plot = h ? `<figure>${histogramPlot(h, limits, key, `Histogram of |${what}| over the elements of ${name}`)}` +
    `<figcaption>${h.zero} element${h.zero === 1 ? '' : 's'} equal (not on the log axis)${h.nonFinite ? `, ${h.nonFinite} not finite` : ''}; reference peak ${numText(h.peak)}. ` +
    'A maxRel gate is drawn as a band: an element below it passes at any magnitude, one above it fails at any magnitude.</figcaption></figure>' : '';
  return `<section class="output" aria-label="output ${esc(name)}"><h3><code>${esc(name)}</code></h3><p>${figs}</p>${plot}</section>`;
}

function metricFigures(o: Record<string, unknown>, at: string): string {
  const part = (k: string, text: (v: number) => string) => (typeof o[k] === 'number' || typeof o[k] === 'string'
    ? `${k} ${fig(`${at}.${k}`, o[k] as number, text(Number(o[k])))}` : '');
  return [part('maxAbs', numText), part('maxRel', numText), part('rms', numText), part('cosine', cosineText)].filter(Boolean).join(' · ');
}

function checkSection(c: CheckSummary | null, pre: string, at: string): string {
  if (c === null || c.skipped !== null) return '';
  const blocks = c.outputs.map((o: OutputCheck, i) => outputBlock(o.name,
    `${badge(o.passed ? 'passed' : 'failed')} ${metricFigures(o as unknown as Record<string, unknown>, `${at}check.outputs.${i}`)}${o.problem ? ` · ${esc(o.problem)}` : ''}`,
    o.histogram, o.limits ?? [], `${pre}hist-${i}`, 'folded - original'));
  return `<h2 id="${pre}check">Whole-model check, per output</h2><p class="sub">Original and folded model on the same seeded probes; the differences are those the metrics judge.</p>${blocks.join('')}`;
}

function quantSection(r: FoldReport, pre: string, at: string): string {
  const rows = r.quantization;
  if (rows.length === 0) return '';
  const hasSqnr = rows.some((q) => 'sqnrBefore' in q && 'sqnrAfter' in q);
  const db = (path: string, v: number) => fig(path, v, dbText(v));
  const body = rows.map((row, i) => {
    const q = `${at}quantization.${i}`;
    const sqnr = hasSqnr ? `<td>${db(`${q}.sqnrBefore.worstChannel`, row.sqnrBefore.worstChannel)} → ${db(`${q}.sqnrAfter.worstChannel`, row.sqnrAfter.worstChannel)}</td>` +
      `<td>${db(`${q}.sqnrAfter.tensor`, row.sqnrAfter.tensor)} / ${db(`${q}.sqnrAfter.channel`, row.sqnrAfter.channel)}</td>` : '';
    const layer = row.copy === undefined ? '' : ` → copy <code>${esc(row.copy)}</code>`;
    return `<tr><td><code>${esc(row.target)}</code>${layer}</td><td>${fig(`${q}.channels`, row.channels, String(row.channels))}</td>` +
      `<td>${fig(`${q}.spreadBefore`, row.spreadBefore, ratioText(row.spreadBefore))} → ${fig(`${q}.spreadAfter`, row.spreadAfter, ratioText(row.spreadAfter))}</td>` +
      `${sqnr}<td>${row.flagged ? '<span class="badge s-failed">▲ flagged</span>' : 'no'}</td></tr>`;
  }).join('');
  const threshold = 'quantThresholdDb' in r ? ` Flagged: some output channel keeps less than ${fig(`${at}quantThresholdDb`, r.quantThresholdDb, dbText(r.quantThresholdDb))} dB SQNR under one per-tensor 8-bit scale; consider per-channel quantization.` : '';
  return `<h2 id="${pre}quant">Quantization readiness</h2><p class="sub">Per folded layer: spread = widest / median output-channel weight range, before and after the fold (Nagel et al. 2019, arXiv:1906.04721).${threshold}</p>` +
    `<figure>${spreadPlot(rows, `${pre}spread`)}</figure><div class="scroll"><table><thead><tr><th>layer</th><th>channels</th><th>spread before → after</th>` +
    `${hasSqnr ? '<th>worst-channel SQNR, per-tensor scale (dB) before → after</th><th>SQNR after, per tensor / per channel (dB)</th>' : ''}<th>flagged</th></tr></thead><tbody>${body}</tbody></table></div>`;
}

/** --equalize: each pair, equalized (worst-channel SQNR of both layers before -> after) or refused and why. */
function equalizeSection(r: FoldReport, pre: string, at: string): string {
  const pairs = 'equalized' in r ? r.equalized : [];
  if (!pairs.length) return '';
  const db = (path: string, v: number) => fig(path, v, dbText(v));
  const rows = pairs.map((e, i) => {
    const q = `${at}equalized.${i}.sqnr`;
    const detail = e.status === 'equalized' && e.sqnr
      ? `<code>${esc(e.first)}</code> ${db(`${q}.firstBefore.worstChannel`, e.sqnr.firstBefore.worstChannel)} → ${db(`${q}.firstAfter.worstChannel`, e.sqnr.firstAfter.worstChannel)}; ` +
        `<code>${esc(e.second)}</code> ${db(`${q}.secondBefore.worstChannel`, e.sqnr.secondBefore.worstChannel)} → ${db(`${q}.secondAfter.worstChannel`, e.sqnr.secondAfter.worstChannel)}`
      : `<code>${esc(e.reason ?? 'refused')}</code>: ${esc(e.hint)}`;
    return `<tr><td>${badge(e.status === 'equalized' ? 'equalized' : 'refused')}</td><td><code>${esc(e.first)}</code> → <code>${esc(e.second)}</code></td><td>${detail}</td></tr>`;
  }).join('');
  return `<h2 id="${pre}equalize">Equalized pairs</h2><p class="sub">Cross-layer equalization; worst-channel SQNR under one per-tensor 8-bit scale (dB), before → after.</p>` +
    `<div class="scroll"><table><thead><tr><th>status</th><th>pair</th><th>SQNR, or why refused</th></tr></thead><tbody>${rows}</tbody></table></div>`;
}

/** --simulate-int8 weights: each output's error with 8-bit weights, original and folded model. */
function int8Section(r: FoldReport, pre: string, at: string): string {
  const s = 'int8' in r ? r.int8 : null;
  if (!s) return '';
  const figs = (f: { maxAbs: number; maxRel: number; cosine: number } | null, path: string) => (f
    ? metricFigures(f as unknown as Record<string, unknown>, path) : 'not compared');
  const rows = s.outputs.map((o, i) => `<tr><td><code>${esc(o.name)}</code></td>` + (o.problem ? `<td colspan="2">${esc(o.problem)}</td>`
    : `<td>${figs(o.original, `${at}int8.outputs.${i}.original`)}</td><td>${figs(o.folded, `${at}int8.outputs.${i}.folded`)}</td>`) + '</tr>').join('');
  return `<h2 id="${pre}int8">8-bit weights</h2><p class="sub">Each model with its Conv/Gemm/MatMul weights rounded to 8 bits (${s.granularity === 'tensor' ? 'one scale per tensor' : 'one scale per output channel'}), against the unrounded original in float64; no gate.</p>` +
    `<div class="scroll"><table><thead><tr><th>output</th><th>original model</th><th>folded model</th></tr></thead><tbody>${rows}</tbody></table></div>`;
}

// ---- bodies -------------------------------------------------------------------------------------------

const cautions = () => `<p class="caution">${esc(CAUTION.join(' '))}</p>`;

/** `pre` prefixes the page's ids and `at` the JSON paths (both empty for a single report). */
export function foldBody(r: FoldReport, pre = '', at = ''): string {
  const entries = r.normalizations as Entry[];
  const overview = [
    tile('model', `<code>${esc(r.model)}</code>${r.output ? `<br>written to <code>${esc(r.output)}</code>` : '<br>nothing written'}` +
      (r.staleSideFile ? `<br>left as it was: <code>${esc(r.staleSideFile)}</code>, the side file of the model replaced (the new one reads none)` : '')),
    shaTile(r.sha256, `${at}sha256`), shaTile(r.externalSha256, `${at}externalSha256`, EXTERNAL_TITLE),
    tile('nodes', `${fig(`${at}nodesBefore`, r.nodesBefore, String(r.nodesBefore))} before, ${fig(`${at}nodesAfter`, r.nodesAfter, String(r.nodesAfter))} after`),
    tile('weight bytes', `${fig(`${at}bytesBefore`, r.bytesBefore, bytesText(r.bytesBefore))} before, ${fig(`${at}bytesAfter`, r.bytesAfter, bytesText(r.bytesAfter))} after`),
    countsTile(entries), checkTile(r.check, at), runTile(r.run, at),
  ];
  if (r.storage) overview.push(tile('storage', `${esc(r.storage.store)}: ${fig(`${at}storage.tensorsConverted`, r.storage.tensorsConverted, String(r.storage.tensorsConverted))} tensors converted`));
  const why = r.check?.status === 'skipped' ? '--strict: the whole-model check was skipped' : 'a gate failed';
  return `<h1>pleat fold <code>${esc(r.model)}</code></h1><p class="sub">${r.failed ? `${badge('failed')} ${esc(why)}; nothing was written` : 'Folded.'}</p>` +
    `<h2 id="${pre}overview">Overview</h2><dl class="tiles">${overview.join('')}</dl>` +
    `<h2 id="${pre}ledger">Ledger</h2>${ledger(entries, pre)}${cards(entries, r.sketches, pre, at)}` +
    checkSection(r.check, pre, at) + quantSection(r, pre, at) + equalizeSection(r, pre, at) + int8Section(r, pre, at);
}

export function auditBody(r: AuditReport, pre = '', at = ''): string {
  const entries = r.normalizations as Entry[];
  const overview = [
    tile('model', `<code>${esc(r.model)}</code>`), shaTile(r.sha256, `${at}sha256`),
    shaTile(r.externalSha256, `${at}externalSha256`, EXTERNAL_TITLE),
    tile('foldable / kept', `${fig(`${at}foldable`, r.foldable, String(r.foldable))} foldable, ${fig(`${at}kept`, r.kept, String(r.kept))} kept`),
    countsTile(entries), tile('fail on', r.failOn ? `<code>--fail-on ${esc(r.failOn)}</code>: ${badge(r.failed ? 'failed' : 'passed')}` : 'not set'),
    runTile(r.run, at),
  ];
  return `<h1>pleat audit <code>${esc(r.model)}</code></h1><p class="sub">Nothing is written by an audit.</p>` +
    `<h2 id="${pre}overview">Overview</h2><dl class="tiles">${overview.join('')}</dl>` +
    `<h2 id="${pre}ledger">Ledger</h2>${ledger(entries, pre)}${cards(entries, r.sketches, pre, at)}`;
}

export interface CompareExtras { sha256?: { a: string; b: string }; externalSha256?: { a?: string; b?: string }; run?: RunFigures }

export function compareBody(r: CompareReport, a: string, b: string, x: CompareExtras = {}): string {
  const overview = [
    tile('model A (reference, float64)', `<code>${esc(a)}</code>`), tile('model B (candidate)', `<code>${esc(b)}</code>`),
    shaTile(x.sha256?.a, 'sha256.a', 'SHA-256 of A'), shaTile(x.externalSha256?.a, 'externalSha256.a', "SHA-256 of A's external data"),
    shaTile(x.sha256?.b, 'sha256.b', 'SHA-256 of B'), shaTile(x.externalSha256?.b, 'externalSha256.b', "SHA-256 of B's external data"),
    // (the status as every other format gives it: a check that compared nothing is skipped, with its reason)
    tile('verdict', `${badge(r.status)} ${r.skipped ? `<code>${esc(r.skipped.reason)}</code>: ${esc(r.skipped.message)}; ` : ''}${fig('probes', r.probes, String(r.probes))} probe${r.probes === 1 ? '' : 's'}, seed ${fig('seed', r.seed, String(r.seed))}`),
    runTile(x.run, ''),
  ];
  const blocks = r.outputs.map((o, i) => {
    const at = `outputs.${i}`;
    let figs = `${badge(outputSkipped(o.status) ? 'skipped' : o.passed ? 'passed' : 'failed')} ${esc(o.status)}`;
    if (o.metrics) figs += ` · ${metricFigures(o.metrics as unknown as Record<string, unknown>, `${at}.metrics`)}`;
    if (o.budget) figs += ` · added by B ${fig(`${at}.budget.addedAbs`, o.budget.addedAbs, numText(o.budget.addedAbs))} abs, ${fig(`${at}.budget.addedRel`, o.budget.addedRel, numText(o.budget.addedRel))} rel`;
    if (o.gate) figs += ` · gate <code>${esc(o.gate.expr)}</code>`;
    if (o.problem) figs += ` · ${esc(o.problem)}`;
    return outputBlock(o.name, figs, o.histogram, o.gate?.limits ?? [], `hist-${i}`, 'B - A');
  });
  return `<h1>pleat compare</h1><p class="sub"><code>${esc(a)}</code> against <code>${esc(b)}</code></p>` +
    `<h2 id="overview">Overview</h2><dl class="tiles">${overview.join('')}</dl><h2 id="outputs">Per output</h2>${blocks.join('')}`;
}

export const errorBody = (command: string, model: string, message: string) =>
  `<h1>pleat ${esc(command)} <code>${esc(model)}</code></h1><p>${badge('failed')} ${esc(message)}</p>`;

/** The whole document around one or more bodies (a batch gives one section per model). */
export function htmlDocument(title: string, bodies: readonly string[]): string {
  const sections = bodies.length === 1 ? bodies[0]! : bodies.map((b, i) => `<section class="model" id="m${i}">${b}</section>`).join('<hr>');
  return '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">' +
    '<meta name="viewport" content="width=device-width, initial-scale=1">' +
    `<meta http-equiv="Content-Security-Policy" content="default-src 'none'; style-src 'unsafe-inline'; script-src 'unsafe-inline'; img-src data:">` +
    `<title>${esc(title)}</title><style>${CSS}</style>` +
    "<script>addEventListener('beforeprint',()=>document.querySelectorAll('details').forEach((d)=>{d.open=true}))</script>" +
    `</head><body><main>${sections}${cautions()}</main></body></html>\n`;
}
