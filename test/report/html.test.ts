// The HTML report in a real browser (headless Chromium through playwright-core): a demo fold's page loads with
// no console error and no request beyond its own file, every card and plot is there and visible (DOM queries
// through the browser), the keyboard reaches the cards, and the ledger and cards link both ways. Then: the
// same input and flags give the same bytes, and every figure the page shows is the figure of the JSON report
// of the same run. The screenshot for the README is saved to models/images/fold-report.png.
import { afterAll, beforeAll, describe, expect, it } from 'vitest';
import { copyFileSync, mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import type { BrowserContext, Page } from 'playwright-core';
import { pleat, ROOT } from '../helpers/cli.js';
import { browserAvailable, openBrowser } from '../helpers/browser.js';
import { bytesText, cosineText, dbText, numText, ratioText } from '../../src/report/format.js';
import { renderJobs } from '../../src/report/render.js';
import { toJsonText } from '../../src/report/json.js';
import type { FoldReport } from '../../src/jobs/types.js';
import { foldReport } from './fixtures.js';

// Runs work in a scratch folder holding a copy of the demo models, so the paths the page shows (and so the
// screenshot) are the same on every machine.
const dir = mkdtempSync(join(tmpdir(), 'pleat-html-'));
const at = (f: string) => join(dir, f);
mkdirSync(at('models'));
for (const m of ['tray-sorter.onnx', 'pump-vibration.onnx']) copyFileSync(join(ROOT, 'models', m), at(join('models', m)));
const model = 'models/tray-sorter.onnx';
const foldArgs = (report: string[], extra: string[] = []) =>
  ['fold', model, '-o', 'tray-sorter.folded.onnx', '--dim', 'batch=1', ...report.flatMap((r) => ['--report', r]), ...extra];

function run(args: string[]): void {
  const r = pleat(args, { cwd: dir });
  expect(r.stderr).toBe('');
  expect(r.code).toBe(0);
}

afterAll(() => rmSync(dir, { recursive: true, force: true }));

beforeAll(() => {
  // the run whose figures are checked: HTML and JSON of the same run, with the run's own time and memory
  run(foldArgs(['figures.html', 'figures.json'], ['--run-figures']));
  // two runs with the same input and flags (the report file's name is not part of the page)
  run(foldArgs(['first.html']));
  run(foldArgs(['html:second.htm']));
}, 240_000);

/** The page in the browser, failing the test on any console error, page error, failed or outside request. */
async function load(context: BrowserContext, file: string): Promise<{ page: Page; problems: string[] }> {
  const page = await context.newPage();
  const problems: string[] = [];
  const url = pathToFileURL(file).href;
  page.on('console', (m) => { if (m.type() === 'error' || m.type() === 'warning') problems.push(`console ${m.type()}: ${m.text()}`); });
  page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
  page.on('requestfailed', (r) => problems.push(`failed request: ${r.url()}`));
  page.on('request', (r) => { if (r.url() !== url) problems.push(`request beyond the file: ${r.url()}`); });
  await page.goto(url, { waitUntil: 'load' });
  return { page, problems };
}

const json = (f: string) => JSON.parse(readFileSync(at(f), 'utf8'));

/** The value at a dotted path of the JSON report ('check.outputs.0.maxAbs'). */
function lookup(obj: unknown, path: string): unknown {
  return path.split('.').reduce<unknown>((o, k) => (o as Record<string, unknown> | undefined)?.[k], obj);
}

/** How the page writes each figure: the report's own text helpers, chosen by the figure's name. */
function expectedText(path: string, v: unknown): string {
  const key = path.split('.').at(-1)!;
  const n = typeof v === 'string' && /^-?(Infinity|NaN)$/.test(v) ? Number(v) : v;
  if (typeof n !== 'number') return String(v);
  if (['maxAbs', 'maxRel', 'rms', 'addedAbs', 'addedRel'].includes(key)) return numText(n);
  if (key === 'cosine') return cosineText(n);
  if (key.startsWith('bytes') || key === 'peakMemoryBytes') return bytesText(n);
  if (key.startsWith('spread')) return ratioText(n);
  if (key === 'seconds') return `${n.toFixed(2)} s`;
  if (path.includes('.sqnr') || key === 'quantThresholdDb') return dbText(n);
  return String(n);
}

interface Shown { path: string; value: string; text: string }
const figuresOf = (page: Page) => page.$$eval('[data-figure]', (els) => els.map((e) => ({
  path: e.getAttribute('data-figure')!, value: e.getAttribute('data-value')!, text: e.textContent ?? '' })));

/** Every figure on the page equals the JSON value at its path and is written the way the JSON value formats. */
function expectFiguresMatch(shown: Shown[], report: unknown): void {
  expect(shown.length).toBeGreaterThan(0);
  for (const f of shown) {
    const v = lookup(report, f.path);
    expect(v, f.path).not.toBeUndefined();
    expect(f.value, f.path).toBe(String(v));
    expect(f.text, f.path).toBe(expectedText(f.path, v));
  }
}

const browser = browserAvailable();

describe.skipIf(!browser)('HTML report in headless Chromium', () => {
  let context: BrowserContext;
  let close: () => Promise<void>;
  beforeAll(async () => { ({ context, close } = await openBrowser()); }, 60_000);
  afterAll(async () => { await close?.(); });

  it('loads clean; every card and plot is present and visible; links go both ways; the keyboard reaches a card', async () => {
    const report = json('figures.json');
    const { page, problems } = await load(context, at('first.html'));
    const entries: Array<{ node: string; status: string }> = report.normalizations;
    // one card per normalization, in ledger order, each visible, with its status as a word
    const cards = await page.$$eval('article.card', (els) => els.map((e) => {
      const r = e.getBoundingClientRect();
      const style = getComputedStyle(e);
      return { id: e.id, code: e.querySelector('h3 code')?.textContent, badge: e.querySelector('.badge')?.textContent?.trim(),
        visible: r.width > 0 && r.height > 0 && style.visibility === 'visible' && style.display !== 'none',
        drawings: [...e.querySelectorAll('svg.sketch')].map((s) => ({
          nodes: s.querySelectorAll('g.node').length, edges: s.querySelectorAll('path.edge').length,
          width: s.getBoundingClientRect().width })),
        tabindex: e.getAttribute('tabindex') };
    }));
    expect(cards.map((c) => c.code)).toEqual(entries.map((e) => e.node));
    for (const [i, c] of cards.entries()) {
      const e = entries[i]!;
      expect(c.visible).toBe(true);
      expect(c.tabindex).toBe('0');
      expect(c.badge).toMatch(new RegExp(`^\\S+ ${e.status}$`)); // a shape and the word, not colour alone
      const sketch = report.sketches.find((s: { node: string }) => s.node === e.node);
      const views = [sketch.before, ...(sketch.after ? [sketch.after] : [])];
      expect(c.drawings.map((d) => [d.nodes, d.edges])).toEqual(views.map((v: { nodes: unknown[]; edges: unknown[] }) => [v.nodes.length, v.edges.length]));
      expect(c.drawings.every((d) => d.width > 50)).toBe(true);
      expect(c.drawings.length).toBe(e.status === 'folded' ? 2 : 1);
    }
    // the plots: one histogram per output of the whole-model check (with the gate drawn), the spread plot
    const hist = await page.$$eval('svg.plot.histogram', (els) => els.map((e) => ({
      bars: e.querySelectorAll('rect.bar').length, limits: e.querySelectorAll('line.limit').length, width: e.getBoundingClientRect().width })));
    expect(hist).toHaveLength(report.check.outputs.length);
    for (const h of hist) { expect(h.bars).toBeGreaterThan(0); expect(h.limits).toBeGreaterThan(0); expect(h.width).toBeGreaterThan(200); }
    const spread = await page.$$eval('svg.plot.spread', (els) => els.map((e) => ({
      rows: e.querySelectorAll('g.row').length, width: e.getBoundingClientRect().width })));
    expect(spread).toEqual([{ rows: report.quantization.length, width: expect.any(Number) }]);
    expect(spread[0]!.width).toBeGreaterThan(200);
    expect(await page.locator('svg.plot').count()).toBe(hist.length + 1);
    for (const p of await page.locator('svg.plot').all()) expect(await p.isVisible()).toBe(true);

    // ledger -> card -> ledger
    const kept = entries.findIndex((e) => e.status === 'kept');
    await page.click(`#row-${kept} a`);
    expect(await page.evaluate(() => document.querySelector(':target')?.id)).toBe(`card-${kept}`);
    await page.click(`#card-${kept} a.back`);
    expect(await page.evaluate(() => document.querySelector(':target')?.id)).toBe(`row-${kept}`);

    // Tab from the top reaches a card, and the focused card shows a visible outline
    await page.goto(pathToFileURL(at('first.html')).href);
    let focused: { card: boolean; outline: string } = { card: false, outline: '' };
    for (let i = 0; i < 80 && !focused.card; i++) {
      await page.keyboard.press('Tab');
      focused = await page.evaluate(() => {
        const a = document.activeElement as HTMLElement | null;
        const s = a ? getComputedStyle(a) : null;
        return { card: !!a?.matches('article.card'), outline: s ? `${s.outlineStyle} ${s.outlineWidth}` : '' };
      });
    }
    expect(focused.card).toBe(true);
    expect(focused.outline).toMatch(/^solid [1-9]/);

    expect(problems).toEqual([]);
    await page.close();

    // the README's screenshot: the top of a freshly opened page (overview, ledger, first cards), nothing focused
    mkdirSync(join(ROOT, 'models', 'images'), { recursive: true });
    const shot = await context.newPage();
    await shot.setViewportSize({ width: 1200, height: 2000 });
    await shot.goto(pathToFileURL(at('first.html')).href, { waitUntil: 'load' });
    await shot.screenshot({ path: join(ROOT, 'models', 'images', 'fold-report.png'), animations: 'disabled', caret: 'hide' });
    await shot.close();
  }, 120_000);

  it('reflows at 200% zoom (no page-wide horizontal scroll) and prints without the navigation links', async () => {
    const { page, problems } = await load(context, at('first.html'));
    await page.setViewportSize({ width: 600, height: 900 }); // 1200 px of screen at 200% zoom
    expect(await page.evaluate(() => document.documentElement.scrollWidth)).toBeLessThanOrEqual(600);
    for (const c of await page.locator('article.card').all()) {
      const box = (await c.boundingBox())!;
      expect(box.x + box.width).toBeLessThanOrEqual(600);
    }
    await page.emulateMedia({ media: 'print' });
    expect(await page.locator('a.back').first().isVisible()).toBe(false);
    expect(await page.locator('article.card').first().isVisible()).toBe(true);
    expect(problems).toEqual([]);
    await page.close();
  }, 60_000);

  it('fields other reports add are shown when present: proof figures, check status, affine steps collapsed; non-finite figures', async () => {
    const base = foldReport();
    const report = {
      ...base,
      normalizations: [
        { ...base.normalizations[0]!, kind: 'normalization', proof: { maxAbs: 2.5e-8, maxRel: 1.25e-7, shape: [1, 16, 8, 8] } },
        ...base.normalizations.slice(1),
        { node: 'scale_mul', op: 'Mul', status: 'folded', direction: 'into-producer', target: 'head_fc', reason: null, hint: 'a constant scale', graph: 'main', kind: 'affine-step' },
      ],
      check: { ...base.check!, passed: false, status: 'failed' },
      quantization: [base.quantization[0]!, { ...base.quantization[0]!, target: 'wide', spreadAfter: Infinity, sqnrAfter: { tensor: Infinity, channel: 12.5, worstChannel: -Infinity } }],
    } as unknown as FoldReport;
    writeFileSync(at('fixture.html'), await renderJobs('fold', [{ model: report.model, report, exitCode: 0 }], 'html'));
    const { page, problems } = await load(context, at('fixture.html'));
    expectFiguresMatch(await figuresOf(page), JSON.parse(toJsonText(report)));
    const shown = new Set((await figuresOf(page)).map((f) => f.path));
    for (const p of ['normalizations.0.proof.maxAbs', 'normalizations.0.proof.maxRel', 'quantization.0.sqnrAfter.worstChannel', 'quantization.1.spreadAfter', 'quantThresholdDb']) expect(shown).toContain(p);
    // the affine step has its card in a collapsed section; the normalizations' cards are outside it
    expect(await page.locator('details#affine').evaluate((d) => (d as HTMLDetailsElement).open)).toBe(false);
    const isStep = (e: { kind?: unknown }) => e.kind === 'affine-step';
    const all = report.normalizations as Array<{ node: string; kind?: unknown }>;
    expect(await page.locator('details#affine article.card h3 code').allTextContents()).toEqual(all.filter(isStep).map((e) => e.node));
    expect(await page.locator('#norm-cards > article.card h3 code').allTextContents()).toEqual(all.filter((e) => !isStep(e)).map((e) => e.node));
    expect(all.filter(isStep).map((e) => e.node)).toContain('scale_mul');
    await page.locator('details#affine summary').click();
    for (const c of await page.locator('details#affine article.card').all()) expect(await c.isVisible()).toBe(true);
    // check status from its own field; text that looks like markup stays text
    expect(await page.locator('.tile', { hasText: 'whole-model check' }).locator('.badge').textContent()).toBe('✘ failed');
    const kept = base.normalizations.findIndex((e) => e.node === 'edge_bn');
    expect(await page.locator(`#card-${kept} dd`).allTextContents()).toContain(base.normalizations[kept]!.hint);
    expect(problems).toEqual([]);
    await page.close();
  }, 60_000);

  it('every figure on the fold page is the figure of the JSON report of the same run', async () => {
    const report = json('figures.json');
    const { page, problems } = await load(context, at('figures.html'));
    const shown = await figuresOf(page);
    expectFiguresMatch(shown, report);
    // the overview and the plots' figures are all there
    const paths = new Set(shown.map((f) => f.path));
    for (const p of ['sha256', 'nodesBefore', 'nodesAfter', 'bytesBefore', 'bytesAfter', 'run.seconds', 'run.peakMemoryBytes', 'check.probes']) expect(paths).toContain(p);
    report.check.outputs.forEach((_: unknown, i: number) => {
      for (const k of ['maxAbs', 'maxRel', 'rms', 'cosine']) expect(paths).toContain(`check.outputs.${i}.${k}`);
    });
    report.quantization.forEach((_: unknown, i: number) => {
      for (const k of ['spreadBefore', 'spreadAfter', 'sqnrBefore.worstChannel', 'sqnrAfter.worstChannel']) expect(paths).toContain(`quantization.${i}.${k}`);
    });
    // tallies the page derives (counts by status and reason) recounted from the JSON
    const counts = Object.fromEntries(await page.$$eval('[data-count]', (els) => els.map((e) => [e.getAttribute('data-count')!, Number(e.textContent)])));
    const want: Record<string, number> = { entries: report.normalizations.length };
    for (const e of report.normalizations) {
      want[`status:${e.status}`] = (want[`status:${e.status}`] ?? 0) + 1;
      if (e.reason) want[`reason:${e.reason}`] = (want[`reason:${e.reason}`] ?? 0) + 1;
    }
    expect(counts).toEqual(want);
    // each histogram's bars are the JSON histogram's non-empty bins
    const bars = await page.$$eval('svg.plot.histogram', (els) => els.map((e) => e.querySelectorAll('rect.bar').length));
    expect(bars).toEqual(report.check.outputs.map((o: { histogram: { counts: number[] } }) => o.histogram.counts.filter((c) => c > 0).length));
    expect(problems).toEqual([]);
    await page.close();
  }, 120_000);

  it('audit and compare pages: figures are those of their JSON reports; no console error or request', async () => {
    run(['audit', 'models/pump-vibration.onnx', '--report', 'audit.html', '--report', 'audit.json']);
    run(['fold', 'models/pump-vibration.onnx', '-o', 'pump.onnx', '--equalize', '--simulate-int8', 'weights', '--report', 'pump.html', '--report', 'pump.json']);
    run(['compare', 'models/pump-vibration.onnx', 'pump.onnx', '--report', 'compare.html', '--report', 'compare.json']);
    // a batch: one section per model, figures at their place in the batch JSON
    run(['fold', 'models/pump-vibration.onnx', 'models/tray-sorter.onnx', '--out-dir', 'batch', '--dim', 'batch=1', '--report', 'batch.html', '--report', 'batch.json']);
    for (const [html, j, cards, plots] of [['audit.html', 'audit.json', 5, 0], ['compare.html', 'compare.json', 0, 1], ['batch.html', 'batch.json', 16, 3], ['pump.html', 'pump.json', 5, 1]] as const) {
      const { page, problems } = await load(context, at(html));
      const report = json(j);
      expectFiguresMatch(await figuresOf(page), report);
      expect(await page.locator('article.card').count()).toBe(cards);
      expect(await page.locator('svg.plot.histogram').count()).toBe(plots);
      // the sections of --equalize and --simulate-int8 (text report's figures, here as tables)
      expect(await page.locator('#equalize').count()).toBe(report.equalized?.length ? 1 : 0);
      expect(await page.locator('#int8').count()).toBe(report.int8 ? 1 : 0);
      for (const c of await page.locator('article.card, svg.plot').all()) expect(await c.isVisible()).toBe(true);
      expect(problems).toEqual([]);
      await page.close();
    }
  }, 180_000);
});

describe('HTML report bytes', () => {
  it('same input and flags, identical bytes; --run-figures changes the run tile and nothing else', () => {
    const first = readFileSync(at('first.html'), 'utf8');
    expect(readFileSync(at('second.htm'), 'utf8')).toBe(first);
    // the documented exception: the run's time and memory live in the one tile titled "run"
    const runTile = /<div class="tile"><dt>run<\/dt><dd>.*?<\/dd><\/div>/;
    const withFigures = readFileSync(at('figures.html'), 'utf8');
    expect(withFigures).toMatch(runTile);
    expect(withFigures.replace(runTile, '')).toBe(first.replace(runTile, ''));
    expect(withFigures).not.toBe(first);
  });

  it('self-contained: no reference to anything outside the file', () => {
    const page = readFileSync(at('first.html'), 'utf8');
    expect(page).not.toMatch(/(src|href)\s*=\s*"(?!#)/); // every link is to a place on the page
    expect(page).not.toMatch(/@import|url\((?!#)/);
    expect(page).toMatch(/Content-Security-Policy" content="default-src 'none'/);
  });
});
