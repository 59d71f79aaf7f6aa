// The four report formats on hand-built reports. Outside checks: JSON against the shipped JSON Schema with
// ajv (a general-purpose JSON Schema validator), JUnit XML parsed with fast-xml-parser (a general XML parser)
// and checked for the structure CI tools read (testsuites > testsuite > testcase > failure/skipped, counts).
import { describe, expect, it } from 'vitest';
import { foldText } from '../../src/report/ledger-text.js';
import { auditText } from '../../src/report/audit-text.js';
import { compareText } from '../../src/report/compare-text.js';
import { exportText } from '../../src/report/export-text.js';
import { renderCompare, renderJobs, compareJson } from '../../src/report/render.js';
import { escapeXml } from '../../src/report/junit.js';
import { auditMarkdown } from '../../src/report/markdown.js';
import { CAUTION } from '../../src/report/format.js';
import { toJsonText } from '../../src/report/json.js';
import { parseJunit, schemaValidator } from './helpers.js';
import { auditReport, compareReport, foldReport } from './fixtures.js';
import { SCHEMA_VERSION } from '../../src/jobs/types.js';

const ESC = /\u001b\[/;

describe('text', () => {
  it('fold: one ledger line per normalization, totals, check, quantization, caution; no before/after op table', () => {
    const t = foldText(foldReport());
    const lines = t.split('\n');
    expect(lines[0]).toBe('fold models/tray-sorter.onnx -> out/tray-sorter.onnx');
    expect(lines.filter((l) => /^ {2}(folded|kept)\s/.test(l))).toHaveLength(3);
    // other constant affine steps: their own section after the normalizations, not counted as folded norms
    expect(t).toMatch(/also folded \(constant affine steps that are not normalizations\):\n\s+folded\s+act_half\s+Mul\s+into head_fc/);
    expect(t).toMatch(/folded\s+stem_bn\s+BatchNormalization\s+into stem_conv \(into-producer\)/);
    expect(t).toMatch(/kept\s+edge_bn\s+BatchNormalization\s+padded-consumer: remove the padding .* in main\/branch_if\.then_branch/);
    expect(t).toMatch(/2 folded, 1 kept \(and 1 affine step also folded\); 4 nodes removed \(41 -> 37\); 200 B of weights saved/);
    expect(t).toMatch(/whole-model check: passed \(2 probes, seed 0; coverage 2\/2\)/);
    expect(t).toMatch(/tray_class\s+pass\s+maxAbs 1\.20e-7/);
    // each folded line carries its proof's figures
    expect(t).toMatch(/folded\s+stem_bn .*\[proof 2x3x5x5: maxAbs 4\.40e-16, maxRel 2\.10e-16\]/);
    expect(t).toMatch(/stem_conv\s+16 channels\s+spread 2\.4 -> 51\.2\s+sqnr tensor 38\.2 -> 36\.9, channel 41\.5 -> 41\.5, worst channel 30\.1 -> 8\.4\s+flagged/);
    expect(t).toMatch(/flagged below 20\.0 dB/);
    expect(t.trimEnd().endsWith(CAUTION.at(-1)!)).toBe(true);
    expect(t).not.toMatch(ESC);
  });

  it('colour only when asked (the CLI asks only on a TTY without NO_COLOR)', () => {
    expect(foldText(foldReport(), true)).toMatch(ESC);
    expect(auditText(auditReport(), true)).toMatch(ESC);
    expect(auditText(auditReport(), false)).not.toMatch(ESC);
  });

  it('a failed check says nothing was written', () => {
    const r = foldReport({
      output: null, failed: true,
      check: { ...foldReport().check!, status: 'failed', passed: false, gates: ['maxAbs < 1e-9'], outputs: [{ name: 'y', maxAbs: 0.5, maxRel: 0.1, rms: 0.1, cosine: 0.9, passed: false, status: 'compared', count: 4 }] },
    });
    const t = foldText(r);
    expect(t).toMatch(/nothing written \(check failed\)/);
    expect(t).toMatch(/whole-model check: FAILED/);
    expect(t).toMatch(/y\s+FAIL/);
  });

  it('audit and compare', () => {
    const a = auditText(auditReport({ failOn: 'kept', failed: true }));
    expect(a).toMatch(/foldable\s+conv1_bn/);
    expect(a).toMatch(/kept\s+ln\s+LayerNormalization\s+runtime-statistics: statistics come from each input/);
    expect(a).toMatch(/1 foldable, 1 kept/);
    expect(a).toMatch(/--fail-on kept: FAILED/);
    const c = compareText(compareReport(), 'a.onnx', 'b.onnx');
    expect(c).toMatch(/^compare a\.onnx with b\.onnx: FAILED \(3 probes, seed 0\)/);
    expect(c).toMatch(/edges\s+FAIL\s+model B has no output 'edges'/);
    expect(c).toMatch(/error budget: A float32 maxAbs 2\.00e-7, B float32 maxAbs 3\.00e-7, added 1\.00e-7/);
  });

  it('a batch prints each model in order, errors included; the probe caution once for fold, never for audit', async () => {
    const t = await renderJobs('audit', [
      { model: 'a.onnx', report: auditReport({ model: 'a.onnx' }), exitCode: 0 },
      { model: 'bad.onnx', error: { kind: 'bad-model', message: 'bad.onnx: not a readable ONNX model' }, exitCode: 2 },
      { model: 'c.onnx', report: auditReport({ model: 'c.onnx' }), exitCode: 0 },
    ], 'text');
    expect(t.indexOf('audit a.onnx')).toBeLessThan(t.indexOf('audit bad.onnx: error'));
    expect(t.indexOf('audit bad.onnx: error')).toBeLessThan(t.indexOf('audit c.onnx'));
    expect(t).not.toContain(CAUTION[0]!); // audit runs no probes
    const f = await renderJobs('fold', [
      { model: 'a.onnx', report: foldReport({ model: 'a.onnx' }), exitCode: 0 },
      { model: 'c.onnx', report: foldReport({ model: 'c.onnx' }), exitCode: 0 },
    ], 'text');
    expect(f.split(CAUTION[0]!)).toHaveLength(2);
    expect(auditMarkdown(auditReport())).not.toMatch(/Caution/);
  });
});

describe('JSON against the shipped schema (ajv)', () => {
  const validate = schemaValidator();
  const ok = (v: unknown) => { const good = validate(JSON.parse(toJsonText(v))); expect(validate.errors ?? []).toEqual([]); expect(good).toBe(true); };

  it('fold, audit, compare and batch reports validate', async () => {
    ok(foldReport());
    ok(foldReport({ storage: { store: 'float16', tensorsConverted: 3, keptFloat32: ['big_w'], skipped: [{ tensor: 'w2', reason: 'also read by Add' }], castNodes: 3, bytesBefore: 100, bytesAfter: 52 }, check: null }));
    ok(auditReport());
    ok(compareJson(compareReport(), 'a.onnx', 'b.onnx'));
    ok(JSON.parse(await renderJobs('fold', [
      { model: 'x.onnx', report: foldReport(), exitCode: 0 },
      { model: 'y.onnx', error: { kind: 'bad-input', message: 'y.onnx: no such file' }, exitCode: 2 },
    ], 'json')));
  });

  it('non-finite metrics are written as strings the schema accepts', async () => {
    const sq = { tensor: 40, channel: Infinity, worstChannel: -Infinity };
    const r = foldReport({ quantization: [{ target: 'c', norms: ['b'], channels: 3, spreadBefore: 1, spreadAfter: Infinity, sqnrBefore: sq, sqnrAfter: sq, flagged: true }] });
    const text = await renderJobs('fold', [{ model: r.model, report: r, exitCode: 0 }], 'json');
    expect(JSON.parse(text).quantization[0].spreadAfter).toBe('Infinity');
    ok(JSON.parse(text));
  });

  it('the schema rejects what it should (it can fail)', () => {
    expect(validate({ ...foldReport(), schemaVersion: SCHEMA_VERSION + 1 })).toBe(false);
    expect(validate({ ...foldReport(), schemaVersion: SCHEMA_VERSION - 1 })).toBe(false);
    expect(validate({ ...foldReport(), check: { ...foldReport().check!, status: "ok" } })).toBe(false);
    expect(validate({ ...foldReport(), check: { ...foldReport().check!, skipped: "a bare string" } })).toBe(false);
    expect(validate({ ...auditReport(), surprise: 1 })).toBe(false);
    const bad = foldReport();
    (bad.normalizations[3] as { reason: string }).reason = 'no-such-reason';
    expect(validate(JSON.parse(toJsonText(bad)))).toBe(false);
    const keptStep = foldReport();
    Object.assign(keptStep.normalizations[2]!, { status: 'kept', reason: 'shared-output', target: null, direction: null });
    expect(validate(JSON.parse(toJsonText(keptStep)))).toBe(false); // an affine step is never kept
    const folded = foldReport();
    (folded.normalizations[0] as { target: string | null }).target = null;
    expect(validate(JSON.parse(toJsonText(folded)))).toBe(false);
  });
});

describe('JUnit XML (fast-xml-parser)', () => {
  it('audit: one testcase per normalization; kept is skipped, or a failure with --fail-on kept', async () => {
    for (const failOn of [null, 'kept'] as const) {
      const xml = await renderJobs('audit', [{ model: 'm.onnx', report: auditReport({ model: 'm.onnx', failOn, failed: failOn !== null }), exitCode: 0 }], 'junit');
      const j = parseJunit(xml);
      const suites = j.testsuites;
      expect(suites['@tests']).toBe('2');
      const suite = suites.testsuite[0];
      expect(suite['@name']).toBe('m.onnx');
      const cases = suite.testcase;
      expect(cases).toHaveLength(2);
      expect(cases.map((c: Record<string, string>) => c['@classname'])).toEqual(['m.onnx', 'm.onnx']);
      expect(cases[0]['@name']).toBe('conv1_bn BatchNormalization');
      expect(cases[0].failure).toBeUndefined();
      if (failOn) {
        expect(suites['@failures']).toBe('1');
        expect(suites['@skipped']).toBe('0');
        expect(cases[1].failure['@type']).toBe('kept');
        expect(cases[1].failure['@message']).toMatch(/^runtime-statistics: /);
      } else {
        expect(suites['@failures']).toBe('0');
        expect(suites['@skipped']).toBe('1');
        expect(cases[1].skipped['@message']).toMatch(/^runtime-statistics: /);
      }
    }
  });

  it('fold: normalizations plus one case per checked output; escaping survives a parser', async () => {
    const r = foldReport({
      check: { ...foldReport().check!, status: 'failed', passed: false, probes: 1, gates: ['maxAbs < 1e-9'], outputs: [
        { name: 'a<b>&"c"', maxAbs: 1, maxRel: 1, rms: 1, cosine: 0, passed: false, status: 'compared', count: 3 },
        { name: 'ok', maxAbs: 0, maxRel: 0, rms: 0, cosine: 1, passed: true, status: 'compared', count: 3 },
      ] }, failed: true, output: null,
    });
    const j = parseJunit(await renderJobs('fold', [{ model: r.model, report: r, exitCode: 1 }], 'junit'));
    const s = j.testsuites.testsuite[0];
    expect(s['@tests']).toBe('6'); // 3 norms, 2 outputs, 1 layer's 8-bit readiness (the affine step act_half is no test case)
    expect(s['@failures']).toBe('1');
    expect(s['@skipped']).toBe('2'); // the kept norm and the flagged layer
    const names = s.testcase.map((c: Record<string, string>) => c['@name']);
    expect(names).toContain('check output a<b>&"c"');
    expect(names).not.toContain('act_half Mul');
    expect(names).toContain('edge_bn BatchNormalization in main/branch_if.then_branch');
    const kept = s.testcase.find((c: Record<string, string>) => c['@name'].startsWith('edge_bn'));
    expect(kept.skipped['@message']).toBe('padded-consumer: remove the padding of the next convolution <pad=1> & "fold"');
    const q = s.testcase.find((c: Record<string, string>) => c['@name'] === '8-bit readiness stem_conv');
    expect(q.skipped['@message']).toBe('flagged: worst channel 30.1 -> 8.4 dB under one per-tensor 8-bit scale (threshold 20.0 dB)');
  });

  it('a batch error is an <error> case; counts add up over suites', async () => {
    const j = parseJunit(await renderJobs('audit', [
      { model: 'a.onnx', report: auditReport({ model: 'a.onnx' }), exitCode: 0 },
      { model: 'bad.onnx', error: { kind: 'bad-model', message: 'bad.onnx: not a readable ONNX model' }, exitCode: 2 },
    ], 'junit'));
    expect(j.testsuites['@tests']).toBe('3');
    expect(j.testsuites['@errors']).toBe('1');
    expect(j.testsuites.testsuite[1].testcase[0].error['@message']).toBe('bad.onnx: not a readable ONNX model');
  });

  it('compare: one case per output', async () => {
    const j = parseJunit(await renderCompare(compareReport(), 'a.onnx', 'b.onnx', 'junit'));
    expect(j.testsuites['@tests']).toBe('2');
    expect(j.testsuites['@failures']).toBe('1');
  });

  it('escapeXml removes characters XML cannot hold', () => {
    expect(escapeXml('a\u0001b<&>"\'\n')).toBe('a\ufffdb&lt;&amp;&gt;&quot;&apos;&#10;');
  });
});

describe('Markdown', () => {
  it('fold: heading, summary line, table with kept first, flagged quantization, caution quote', async () => {
    const md = await renderJobs('fold', [{ model: 'm', report: foldReport(), exitCode: 0 }], 'markdown');
    const lines = md.split('\n');
    expect(lines[0]).toBe('### pleat fold `models/tray-sorter.onnx`: done');
    expect(md).toMatch(/\*\*2 folded, 1 kept\*\*; nodes 41 → 37/);
    const rows = lines.filter((l) => l.startsWith('| `'));
    expect(rows).toHaveLength(3);
    expect(rows[0]).toMatch(/^\| `edge_bn`/);
    expect(md).not.toMatch(/cloned/);
    const cloned = foldReport();
    cloned.normalizations[0]!.cloneBytes = 2048;
    expect(await renderJobs('fold', [{ model: 'm', report: cloned, exitCode: 0 }], 'markdown')).toMatch(/weights 10\.0 KiB → 9\.8\d? KiB \(1 layer\(s\) cloned for --clone-shared: \+2\.00 KiB\)/);
    expect(foldText(cloned)).toMatch(/1 layer cloned for --clone-shared \(\+2\.00 KiB of weights\)/);
    expect(md).toMatch(/^Also folded \(constant affine steps that are not normalizations\): `act_half` \(Mul\) into `head_fc`\.$/m);
    expect(md).toMatch(/`stem_conv` worst channel 30\.1 → 8\.4 dB, spread 2\.4 → 51\.2/);
    expect(md).toMatch(/^> Caution:/m);
    expect(md).toMatch(/whole-model check passed on 1 output\(s\), worst maxAbs 1\.20e-7, coverage 2\/2/);
    expect(rows.find((r) => r.startsWith('| `stem_bn`'))).toMatch(/proof on 2x3x5x5: maxAbs 4\.40e-16, maxRel 2\.10e-16/);
  });

  it('pipes in names cannot break the table', async () => {
    const md = await renderJobs('audit', [{ model: 'm', report: auditReport({ normalizations: [{ ...auditReport().normalizations[1]!, node: 'a|b' }] }), exitCode: 0 }], 'markdown');
    const row = md.split('\n').find((l) => l.includes('a\\|b'))!;
    expect(row.split(/(?<!\\)\|/).length - 2).toBe(4); // four cells
  });

  // A code span decodes no entity (CommonMark): a name escaped as `kept&lt;/td&gt;` showed those characters as
  // written. Names in code spans stay as they are; plain text escapes & as well as < and >.
  it('names in code spans are shown as they are; plain text escapes &, < and >', async () => {
    const kept = { ...auditReport().normalizations[1]!, node: 'kept</td><b>&lt;', hint: 'pads <1> & "more"' };
    const md = await renderJobs('audit', [{ model: 'm', report: auditReport({ normalizations: [kept] }), exitCode: 0 }], 'markdown');
    const row = md.split('\n').find((l) => l.startsWith('| `kept'))!;
    expect(row).toContain('| `kept</td><b>&lt;` |');
    expect(row).toContain('pads &lt;1&gt; &amp; "more"');
  });
  // A hint quotes names from the model in plain text: a name written as a Markdown link or image became a live
  // link, or an image fetched from anywhere, in the pull-request comment. Brackets are escaped (CommonMark: any
  // ASCII punctuation may be backslash-escaped), so no link or image can open; the text reads the same.
  it('plain text cannot open a link or an image', async () => {
    const kept = { ...auditReport().normalizations[1]!, hint: "the output of '![x](https://example.invalid/p.png)' and '[approve](https://example.invalid)'" };
    const md = await renderJobs('audit', [{ model: 'm', report: auditReport({ normalizations: [kept] }), exitCode: 0 }], 'markdown');
    const row = md.split('\n').find((l) => l.startsWith('| `'))!;
    expect(row).toContain("'!\\[x\\](https://example.invalid/p.png)' and '\\[approve\\](https://example.invalid)'");
    expect(row).not.toMatch(/(^|[^\\])\[/);
  });
});

// The HTML page says what every other format says: a compare that compared nothing was badged "failed" with no
// reason, an empty output "failed", and a fold stopped by --strict on a skipped check blamed a gate.
describe('HTML statuses agree with the other formats', () => {
  const skippedCompare = () => ({
    ...compareReport(), status: 'skipped' as const, passed: false,
    skipped: { reason: 'no-shape' as const, message: "input 'x' has no shape in the model" },
    outputs: [{ name: 'y', status: 'empty' as const, dtype: 'float32', dims: [0], passed: false, problem: "output 'y' has no elements on any probe" }],
  });

  it('a skipped compare is skipped, with its reason, in HTML as in text, JSON and JUnit', async () => {
    const r = skippedCompare();
    const html = await renderCompare(r, 'a.onnx', 'b.onnx', 'html');
    expect(html).toMatch(/verdict[\s\S]*?class="badge s-skipped"[^>]*>[^<]*skipped<\/span> <code>no-shape<\/code>/);
    expect(html).not.toMatch(/class="badge s-failed"/);
    expect(compareText(r)).toMatch(/skipped \(no-shape\)/);
    expect((compareJson(r) as { status: string }).status).toBe('skipped');
    expect(await renderCompare(r, 'a.onnx', 'b.onnx', 'junit')).toMatch(/<skipped/);
  });

  it('a fold that --strict stopped on a skipped check says so, not that a gate failed', async () => {
    const base = foldReport();
    const r = foldReport({ failed: true, output: null, check: { ...base.check!, status: 'skipped', passed: false, skipped: { reason: 'no-shape', message: 'no shape' }, strict: true } as never });
    const html = await renderJobs('fold', [{ model: 'a.onnx', report: r, exitCode: 1 }], 'html');
    expect(html).toContain('--strict: the whole-model check was skipped; nothing was written');
    expect(html).not.toContain('a gate failed');
    const text = exportText({ fold: r, bundle: null } as never);
    expect(text).toContain('bundle: nothing written (--strict: the whole-model check was skipped)');
  });
});

// Names come from the model: one holding a line break split its ledger line in two, one holding an escape
// recoloured the terminal (even with NO_COLOR). Text and Markdown show control characters escaped; a report
// painted for a terminal keeps colour sequences (a name's own among them) and escapes every other control.
describe('control characters in names', () => {
  const named = () => {
    const r = auditReport();
    r.normalizations = r.normalizations.map((e, i) => (i === 0 ? { ...e, node: 'bn2\n#evil', hint: e.hint && 'tab\there' } : i === 1 ? { ...e, node: 'bn\u001b[31mRED\u001b[0m' } : e));
    return r;
  };
  it('text: every entry stays on its line and no control character but the line breaks is left', async () => {
    const t = await renderJobs('audit', [{ model: 'm', report: named(), exitCode: 0 }], 'text');
    expect(t.split('\n').filter((l) => l.startsWith('  ') && /(foldable|kept|folded) /.test(l))).toHaveLength(named().normalizations.filter((e) => e.kind !== 'affine-step').length);
    expect(t).toContain('bn2\\n#evil');
    expect(t).toContain('bn\\x1b[31mRED\\x1b[0m');
    expect(t).not.toMatch(/[\u0000-\u0009\u000b-\u001f\u007f]/);
    const painted = await renderJobs('audit', [{ model: 'm', report: named(), exitCode: 0 }], 'text', true);
    // painted for a terminal: pleat's own colour sequences stay; a name's escape sequence (model data) is shown
    // escaped like any other control, where it used to reach the terminal raw and recolour (or hide, ESC[8m) the rest
    expect(painted).toContain('bn2\\n#evil');
    expect(painted).toContain('bn\\x1b[31mRED\\x1b[0m');
    expect(painted).toMatch(/\u001b\[33mkept {5}\u001b\[0m/);
    expect(painted.replace(/\u001b\[(1|2|31|32|33|0)m/g, '')).not.toMatch(/[\u0000-\u0009\u000b-\u001f\u007f-\u009f]/);
  });
  // ECMA-48's C1 set has one-character forms of CSI (U+009B) and OSC (U+009D), which some terminals act on as they
  // do on ESC [ and ESC ]: shown escaped, in text painted or not and in Markdown.
  it('C1 control characters in names are shown escaped', async () => {
    const r = auditReport();
    r.normalizations = r.normalizations.map((e, i) => (i === 0 ? { ...e, node: 'bn\u009b31mRED\u009d8;;x\u009c' } : e));
    for (const colour of [false, true]) {
      const t = await renderJobs('audit', [{ model: 'm', report: r, exitCode: 0 }], 'text', colour);
      expect(t).toContain('bn\\x9b31mRED\\x9d8;;x\\x9c');
      expect(t).not.toMatch(/[\u0080-\u009f]/);
    }
    const md = await renderJobs('audit', [{ model: 'm', report: r, exitCode: 0 }], 'markdown');
    expect(md).not.toMatch(/[\u0080-\u009f]/);
  });
  // Unicode's bidirectional formatting characters (UAX #9, from memory) reorder how the rest of a line is displayed
  // ("Trojan Source", Boucher and Anderson 2021, arXiv:2111.00169): a name holding U+202E could make a kept entry
  // read like another. Shown as their codes in text (painted or not), Markdown and the HTML page.
  it('bidirectional formatting characters in names are shown as their codes', async () => {
    const r = auditReport();
    const bidi = /[\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]/;
    r.normalizations = r.normalizations.map((e, i) => (i === 0 ? { ...e, node: 'bn\u202edeplof\u2066x\u2069\u200f' } : e));
    for (const colour of [false, true]) {
      const t = await renderJobs('audit', [{ model: 'm', report: r, exitCode: 0 }], 'text', colour);
      expect(t).toContain('bn\\u202edeplof\\u2066x\\u2069\\u200f');
      expect(t).not.toMatch(bidi);
    }
    for (const format of ['markdown', 'html'] as const) {
      const out = await renderJobs('audit', [{ model: 'm', report: r, exitCode: 0 }], format);
      expect(out, format).toContain('bn\\u202edeplof');
      expect(out, format).not.toMatch(bidi);
    }
  });
  it('markdown: no raw control character', async () => {
    const md = await renderJobs('audit', [{ model: 'm', report: named(), exitCode: 0 }], 'markdown');
    expect(md).not.toMatch(/[\u0000-\u0009\u000b-\u001f\u007f]/);
    expect(md).toContain('`bn\\x1b[31mRED\\x1b[0m`');
  });
});
