// Config file loading and merging, report-file specs and the progress bar's on/off rules, as units.
import { describe, expect, it } from 'vitest';
import { mkdirSync, mkdtempSync, readdirSync, readFileSync, rmSync, symlinkSync, truncateSync, writeFileSync } from 'node:fs';
import { execFileSync } from 'node:child_process';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { keepList, loadConfig, runSettings } from '../../cli/config.js';
import { inCi, progressWanted, startProgress } from '../../cli/progress.js';
import { parseReportSpecs } from '../../src/report/files.js';
import { OutputSet } from '../../src/jobs/outputs.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-config-'));
const write = (name: string, v: unknown) => { const p = join(dir, name); writeFileSync(p, typeof v === 'string' ? v : JSON.stringify(v)); return p; };

describe('config file', () => {
  it('absent pleat.config.json is fine; present one is read from the working directory', () => {
    const empty = mkdtempSync(join(tmpdir(), 'pleat-noconf-'));
    expect(loadConfig(undefined, empty)).toEqual({ config: {}, file: null, path: null });
    const here = mkdtempSync(join(tmpdir(), 'pleat-conf-'));
    writeFileSync(join(here, 'pleat.config.json'), JSON.stringify({ seed: 7 }));
    expect(loadConfig(undefined, here).config).toEqual({ seed: 7 });
  });

  it('unknown keys and wrong types are usage errors naming the key', () => {
    expect(() => loadConfig(write('typo.json', { seeds: 1 }))).toThrow(/unknown key 'seeds'/);
    expect(() => loadConfig(write('type.json', { probes: 0 }))).toThrow(/'probes' should be a whole number from 1 to 10000/);
    expect(() => loadConfig(write('dims.json', { dims: { batch: 'one' } }))).toThrow(/'dims' should be/);
    // a shape as text takes its sizes in plain decimal digits, as --shape does ("1x 3" and "1x03" ran as 1x3)
    expect(() => loadConfig(write('shape-space.json', { shapes: { image: '1x 3' } }))).toThrow(/shape-space\.json: 'shapes' should be an object of shapes, each a string of sizes in plain decimal digits/);
    expect(() => loadConfig(write('shape-zero.json', { shapes: { image: '1x03' } }))).toThrow(/'shapes' should be/);
    expect(() => loadConfig(write('shape-exp.json', { shapes: { image: '1,3e0' } }))).toThrow(/'shapes' should be/);
    expect(loadConfig(write('shape-ok.json', { shapes: { image: '1x3,8x8', s: '' } })).config.shapes).toEqual({ image: '1x3,8x8', s: '' });
    // a JSON number past 2^53 is no exact size
    expect(() => loadConfig(write('dims-huge.json', '{"dims": {"batch": 1e300}}'))).toThrow(/'dims' should be/);
    expect(() => loadConfig(write('bad.json', '{ nope'))).toThrow(/not valid JSON/);
    expect(() => loadConfig(write('arr.json', [1]))).toThrow(/expected a JSON object/);
    expect(() => loadConfig(join(dir, 'missing.json'))).toThrow(/cannot read \(ENOENT\)/);
    try { loadConfig(write('typo2.json', { gates: 'x' })); } catch (e) { expect((e as { kind: string }).kind).toBe('usage'); }
  });

  // JSON.parse keeps the last of two members of one name (RFC 8259 leaves it to the reader): a config saying
  // "probes" twice ran with one of them, silently, where a flag given twice is refused.
  it('a key given twice, at the top or inside dims/shapes, is refused naming it', () => {
    expect(() => loadConfig(write('twice.json', '{"probes": 3, "seed": 1, "probes": 4}'))).toThrow(/twice\.json: the key 'probes' is given twice/);
    expect(() => loadConfig(write('twice-escaped.json', '{"seed": 3, "s\\u0065ed": 4}'))).toThrow(/the key 'seed' is given twice/);
    expect(() => loadConfig(write('twice-nested.json', '{"dims": {"batch": 1, "batch": 2}}'))).toThrow(/the key 'dims\.batch' is given twice/);
    // the same name in two different objects, or inside a string, is not a repeat
    expect(loadConfig(write('twice-not.json', '{"dims": {"seed": 1}, "shapes": {"x": [1, 2]}, "gate": "\\"seed\\": 1, \\"seed\\"", "seed": 2}')).config.seed).toBe(2);
  });

  // A config that is there but cannot be read is an error, never "no config" (its "strict": true was lost when a
  // dangling symlink read as absent); a FIFO is refused without waiting (the read blocked for ever); a key that
  // names a member every object inherits ('constructor', 'toString', '__proto__') is unknown, not exit 3.
  it('a dangling or looping symlink, a FIFO or a folder is refused in one line', () => {
    const here = mkdtempSync(join(tmpdir(), 'pleat-conf-'));
    const at = join(here, 'pleat.config.json');
    symlinkSync(join(here, 'moved-away.json'), at);
    expect(() => loadConfig(undefined, here)).toThrow(/^--config pleat\.config\.json: cannot read \(ENOENT\)$/);
    rmSync(at);
    symlinkSync(at, at); // a link to itself
    expect(() => loadConfig(undefined, here)).toThrow(/^--config pleat\.config\.json: cannot read \(ELOOP\)$/);
    rmSync(at);
    execFileSync('mkfifo', [at]);
    expect(() => loadConfig(undefined, here)).toThrow(/cannot read \(not a regular file: a FIFO, socket or device\)$/);
    expect(() => loadConfig(at)).toThrow(/cannot read \(not a regular file/);
    rmSync(at);
    mkdirSync(at);
    expect(() => loadConfig(undefined, here)).toThrow(/cannot read \(a folder, not a file\)$/);
  });

  for (const key of ['constructor', 'toString', 'hasOwnProperty', 'valueOf', '__proto__', '__defineGetter__']) {
    it(`the key '${key}' is unknown (a usage error), not a member every object inherits`, () => {
      const p = write(`proto-${key}.json`, `{"${key}": 1}`);
      let err: unknown;
      try { loadConfig(p); } catch (e) { err = e; }
      expect((err as { kind?: string }).kind).toBe('usage');
      expect((err as Error).message).toMatch(new RegExp(`unknown key '${key}'`));
    });
  }

  it('flags override the file per name; keep lists are joined', () => {
    const { config } = loadConfig(write('full.json', {
      dims: { batch: 2, len: 16 }, shapes: { image: '1x3x8x8', extra: [2, 2] }, gate: 'maxAbs < 1', keep: ['a', 'b'],
      failOn: 'kept', probes: 4, seed: 9, store: 'float16',
    }));
    const s = runSettings(config, { dim: ['batch=1'], shape: ['image=1x3x4x4'], seed: 3 });
    expect([...s.dims]).toEqual([['batch', 1], ['len', 16]]);
    expect([...s.shapes]).toEqual([['image', [1, 3, 4, 4]], ['extra', [2, 2]]]);
    expect(s.seed).toBe(3);
    expect(s.probes).toBe(4);
    expect(s.gate).toBe('maxAbs < 1');
    expect(runSettings(config, { gate: 'cosine > 0.5', probes: 1 })).toMatchObject({ gate: 'cosine > 0.5', probes: 1, seed: 9 });
    expect(keepList(config, ['b', 'c'])).toEqual(['a', 'b', 'c']);
    expect(keepList({}, [])).toBeUndefined();
  });

  it('loads --input files within --max-probe-memory, so a file too large for it is refused before it is read', () => {
    // 20,000,000 float32 values declared (a sparse file): 152.6 MiB as float64, within the default limit, not 16M
    const header = "{'descr': '<f4', 'fortran_order': False, 'shape': (20000000,), }";
    const text = header + ' '.repeat(64 - ((10 + header.length + 1) % 64)) + '\n';
    const prefix = Buffer.from([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0, text.length & 0xff, text.length >> 8]);
    const big = join(dir, 'big.npy');
    writeFileSync(big, Buffer.concat([prefix, Buffer.from(text, 'latin1')]));
    truncateSync(big, 10 + text.length + 80_000_000);
    let error: unknown;
    try { runSettings({}, { input: [`x=${big}`], maxProbeMemory: '16M' }); } catch (e) { error = e; }
    expect((error as Error)?.message).toBe(`${big}: shape (20000000) holds 20000000 values, 152.6 MiB as the evaluator holds them (float64), beyond the probe memory limit of 16.0 MiB; raise --max-probe-memory`);
  });
});

describe('--report specs', () => {
  it('format from the extension or FORMAT:FILE', () => {
    expect(parseReportSpecs(['r.json', 'r.xml', 'markdown:pr.txt', 'text:log'])).toEqual([
      { format: 'json', file: 'r.json' }, { format: 'junit', file: 'r.xml' }, { format: 'markdown', file: 'pr.txt' }, { format: 'text', file: 'log' },
    ]);
  });
  it('one file per format; unknown extensions are usage errors', () => {
    expect(() => parseReportSpecs(['a.json', 'json:b.out'])).toThrow(/two files for the json format/);
    // a format prefix in any case (JSON:f/x.json was read as a path in a folder named 'JSON:f')
    expect(parseReportSpecs(['JSON:f/x.json', 'Markdown:pr.txt'])).toEqual([{ format: 'json', file: 'f/x.json' }, { format: 'markdown', file: 'pr.txt' }]);
    expect(() => parseReportSpecs(['report.pdf'])).toThrow(/cannot tell the format/);
    expect(parseReportSpecs(['report.html', 'x.md'])).toEqual([{ format: 'html', file: 'report.html' }, { format: 'markdown', file: 'x.md' }]);
    expect(parseReportSpecs(['page.htm'])).toEqual([{ format: 'html', file: 'page.htm' }]);
    expect(() => parseReportSpecs(['a.html', 'html:b.out'])).toThrow(/two files for the html format/);
  });
  it('writes atomically: no temporary file is left behind', () => {
    const d = mkdtempSync(join(tmpdir(), 'pleat-rep-'));
    const tx = new OutputSet();
    tx.stage(tx.reserve(join(d, 'r.json'), '--report'), '{}\n');
    tx.commit();
    expect(readdirSync(d)).toEqual(['r.json']);
    expect(readFileSync(join(d, 'r.json'), 'utf8')).toBe('{}\n');
    expect(() => new OutputSet().reserve(join(d, 'no', 'such', 'r.json'), '--report')).toThrow(/the folder .*such does not exist/);
  });
});

describe('progress bar', () => {
  const tty = () => { const chunks: string[] = []; return { isTTY: true, columns: 80, write: (s: string) => { chunks.push(s); }, chunks }; };
  it('drawn on a TTY outside CI without --quiet, then erased', () => {
    const s = tty();
    const p = startProgress(2, 'fold', { stream: s, env: {} });
    p.tick('a.onnx'); p.tick('b.onnx'); p.end();
    expect(s.chunks.join('')).toMatch(/\[#{24}\] 2\/2 fold {2}last: b\.onnx/);
    expect(s.chunks.at(-1)).toBe('\r\u001b[K');
  });
  // The label is a model's file name: one holding an escape sequence reached the terminal raw.
  it('a label holding control characters is drawn escaped', () => {
    const s = tty();
    const p = startProgress(1, 'audit', { stream: s, env: {} });
    p.tick('p\u001b[31mred\u009b2J.onnx'); p.end();
    expect(s.chunks.join('')).toContain('last: p\\x1b[31mred\\x9b2J.onnx');
    expect(s.chunks.join('').replace(/\r\u001b\[K/g, '')).not.toMatch(/[\u0000-\u001f\u007f-\u009f]/);
  });
  it('never in CI, when piped, or with --quiet', () => {
    expect(progressWanted({ isTTY: true, write: () => {} }, false, { CI: 'true' })).toBe(false);
    expect(progressWanted({ isTTY: false, write: () => {} }, false, {})).toBe(false);
    expect(progressWanted({ isTTY: true, write: () => {} }, true, {})).toBe(false);
    expect(progressWanted({ isTTY: true, write: () => {} }, false, {})).toBe(true);
    const s = tty();
    startProgress(3, 'audit', { stream: s, env: { CI: 'true' } }).tick('x');
    expect(s.chunks).toEqual([]);
    expect(inCi({ CI: 'false' })).toBe(false);
    expect(inCi({ CI: '1' })).toBe(true);
  });
});
