// Provenance of a source whose weights live in ONNX external data (side files named by the tensors' `location`
// entries). pleat.source.sha256 is the SHA-256 of the .onnx file alone, so two sources with the same .onnx and
// different side-file weights recorded one digest. pleat.source.external.sha256 now covers the side files, in the
// form the README documents; these tests work that form out on their own with node:crypto and with coreutils'
// sha256sum, and read what pleat wrote with onnx-proto's decoder (independent of pleat's reader).
import { afterAll, describe, expect, it } from 'vitest';
import { createHash } from 'node:crypto';
import { execFileSync } from 'node:child_process';
import { mkdirSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, randn, rng, tensor, uniform } from '../helpers/build.js';
import { pleat, ROOT } from '../helpers/cli.js';
import { schemaValidator } from '../report/helpers.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { foldFile, foldLoaded } from '../../src/jobs/fold.js';
import { auditFile } from '../../src/jobs/audit.js';
import { exportFile } from '../../src/jobs/export.js';
import { readModelFile } from '../../src/onnx/read.js';
import { writeModelFile } from '../../src/onnx/write.js';
import { provenanceOf, setProvenance } from '../../src/jobs/provenance.js';
import { DIGEST_PLACEHOLDER, fillDigest } from '../../src/jobs/sha256.js';
import { renderJobs } from '../../src/report/render.js';
import { toJsonText } from '../../src/report/json.js';

const work = mkdtempSync(join(tmpdir(), 'pleat-prov-ext-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));

const KEY = 'pleat.source.external.sha256';
const sha = (b: Uint8Array | string) => createHash('sha256').update(b).digest('hex');
const VERSION = JSON.parse(readFileSync(join(ROOT, 'package.json'), 'utf8')).version as string;

/** metadata_props of a written model, decoded by onnx-proto. */
function metadataOf(file: string): Array<[string, string]> {
  const m = onnxProto.onnx.ModelProto.decode(readFileSync(file));
  return (m.metadataProps ?? []).map((p) => [p.key ?? '', p.value ?? '']);
}

/**
 * Where each tensor's bytes go. The weight and the conv bias name one file under two spellings (so the .onnx names
 * four distinct locations for three files), and two names outside ASCII sort apart differently by UTF-16 code
 * units (JavaScript's string order) and by UTF-8 bytes (the README's order, LC_ALL=C sort's).
 */
const PLACES: Array<[tensor: string, location: string, offset: number]> = [
  ['w', 'weights.bin', 0], ['bias', './weights.bin', 48],
  ['s', 'norm/params.bin', 0], ['b', 'norm/params.bin', 16],
  ['m', '\u{1F600}.bin', 0], ['v', '\uFF01.bin', 0],
];
const LOCATIONS = [...new Set(PLACES.map(([, l]) => l))];

/**
 * Conv (1x1, 3 -> 4 channels, with bias) then BatchNormalization, every weight in a side file. `weightSeed` sets
 * the Conv weight only: the .onnx bytes are the same for every seed.
 */
function externalModel(folder: string, weightSeed: number, places = PLACES): { model: string; onnx: Uint8Array } {
  mkdirSync(join(folder, 'norm'), { recursive: true });
  const r = rng(7), rw = rng(weightSeed);
  const values: Record<string, [number[], Float32Array]> = {
    w: [[4, 3, 1, 1], randn(rw, 12, 0.5)], bias: [[4], randn(r, 4, 0.1)],
    s: [[4], uniform(r, 4, 0.5, 1.5)], b: [[4], randn(r, 4, 0.2)], m: [[4], randn(r, 4, 0.3)], v: [[4], uniform(r, 4, 0.3, 2)],
  };
  const files = new Map<string, Buffer>(); // by file (the two spellings of weights.bin are one file)
  const g = new GraphBuilder();
  g.input('x', [1, 3, 2, 2]).output('y', [1, 4, 2, 2]);
  for (const [name, location, offset] of places) {
    const [dims, data] = values[name]!;
    const t = tensor(name, dims, data);
    const bytes = Buffer.from(t.rawData!);
    const file = location.replace(/^\.\//, '');
    const held = files.get(file) ?? Buffer.alloc(0);
    files.set(file, Buffer.concat([held, Buffer.alloc(Math.max(0, offset - held.length)), bytes]));
    delete t.rawData;
    t.dataLocation = onnxProto.onnx.TensorProto.DataLocation.EXTERNAL;
    t.externalData = [{ key: 'location', value: location }, { key: 'offset', value: String(offset) }, { key: 'length', value: String(bytes.length) }];
    g.inits.push(t);
  }
  const c = g.node('Conv', ['x', 'w', 'bias'], {}, { name: 'conv' });
  g.node('BatchNormalization', [c, 's', 'b', 'm', 'v'], {}, { name: 'bn', outputs: ['y'] });
  const onnx = modelBytes(g, { metadata: [['owner', 'line 4 sorter']] });
  for (const [file, bytes] of files) writeFileSync(join(folder, file), bytes);
  const model = join(folder, 'sorter.onnx');
  writeFileSync(model, onnx);
  return { model, onnx };
}

/**
 * The README's words, followed here: one line per distinct location value the model names, as written, sorted by
 * the location's UTF-8 bytes; each line the side file's SHA-256 in lowercase hex, two spaces, the location, a line
 * feed; the key's value is the SHA-256 of those lines.
 */
function documentedDigest(folder: string, locations: string[]): string {
  const sorted = [...new Set(locations)].sort((a, b) => Buffer.compare(Buffer.from(a, 'utf8'), Buffer.from(b, 'utf8')));
  return sha(sorted.map((l) => `${sha(readFileSync(join(folder, l)))}  ${l}\n`).join(''));
}

/** The README's recipe through coreutils: sha256sum of the side files in that order, piped into sha256sum. */
function coreutilsDigest(folder: string, locations: string[]): string {
  const sorted = execFileSync('sort', { input: [...new Set(locations)].join('\n') + '\n', env: { ...process.env, LC_ALL: 'C' }, encoding: 'utf8' }).split('\n').filter(Boolean);
  const lines = execFileSync('sha256sum', ['--', ...sorted], { cwd: folder });
  return execFileSync('sha256sum', { input: lines, encoding: 'utf8' }).slice(0, 64);
}

describe('provenance of a source with external data', { timeout: 120_000 }, () => {
  const a = externalModel(join(work, 'a'), 1), b = externalModel(join(work, 'b'), 2);

  it('two sources, one .onnx, different side-file weights: the folded models record different provenance', () => {
    expect(Buffer.compare(a.onnx, b.onnx)).toBe(0);
    expect(readFileSync(join(work, 'a', 'weights.bin')).equals(readFileSync(join(work, 'b', 'weights.bin')))).toBe(false);
    const metas = [a, b].map((src, i) => {
      const out = join(work, `folded-${i}.onnx`);
      const r = foldFile(src.model, out);
      expect(r.normalizations.map((n) => n.status)).toEqual(['folded']);
      expect(r.check?.status).toBe('passed');
      return metadataOf(out);
    });
    // the .onnx's own digest stays what sha256sum model.onnx says, the same for both
    for (const m of metas) expect(Object.fromEntries(m)['pleat.source.sha256']).toBe(sha(a.onnx));
    const ext = metas.map((m) => Object.fromEntries(m)[KEY]);
    expect(ext[0]).toBe(documentedDigest(join(work, 'a'), LOCATIONS));
    expect(ext[1]).toBe(documentedDigest(join(work, 'b'), LOCATIONS));
    expect(ext[0]).not.toBe(ext[1]);
    // the new entry sits right after the source's digest; the source's own entries stay first
    expect(metas[0]!.map(([k]) => k)).toEqual(['owner', 'pleat.version', 'pleat.source.sha256', KEY, 'pleat.check.status', 'pleat.check.gate', 'pleat.check.seed']);
  });

  it('the README recomputation (sha256sum of the side files, sorted, into sha256sum) gives what pleat writes', () => {
    const readme = readFileSync(join(ROOT, 'README.md'), 'utf8');
    expect(readme).toContain(KEY);
    for (const [src, folder] of [[a, join(work, 'a')], [b, join(work, 'b')]] as const) {
      const out = join(folder, 'out.onnx');
      foldFile(src.model, out, { noProofs: true });
      const written = Object.fromEntries(metadataOf(out))[KEY];
      expect(written).toBe(coreutilsDigest(folder, LOCATIONS));
      expect(written).toBe(documentedDigest(folder, LOCATIONS));
    }
    // UTF-8 byte order is not JavaScript's string order for these two names: the sort matters
    const js = [...LOCATIONS].sort(), bytes = [...LOCATIONS].sort((x, y) => Buffer.compare(Buffer.from(x), Buffer.from(y)));
    expect(js).not.toEqual(bytes);
  });

  it("the README's own command line, run in a source folder with its example's locations, prints what pleat writes", () => {
    const folder = join(work, 'readme');
    const places: typeof PLACES = [
      ['w', 'weights.bin', 0], ['bias', './weights.bin', 48],
      ['s', 'norm/params.bin', 0], ['b', 'norm/params.bin', 16], ['m', 'norm/params.bin', 32], ['v', 'norm/params.bin', 48],
    ];
    const src = externalModel(folder, 3, places);
    foldFile(src.model, join(folder, 'out.onnx'), { noProofs: true });
    const readme = readFileSync(join(ROOT, 'README.md'), 'utf8');
    const paragraph = readme.slice(readme.indexOf('`pleat.source.external.sha256` (right after it)'));
    const line = /^sha256sum -- .*$/m.exec(paragraph)![0];
    const printed = execFileSync('sh', ['-c', line], { cwd: folder, encoding: 'utf8' });
    expect(printed).toMatch(/^[0-9a-f]{64} {2}-\n$/);
    expect(Object.fromEntries(metadataOf(join(folder, 'out.onnx')))[KEY]).toBe(printed.slice(0, 64));
  });

  it('a refold of the folded model (its own side file) records that side file, replacing the entry', () => {
    const first = join(work, 'a', 'refold-1.onnx');
    expect(pleat(['fold', a.model, '-o', first, '--external-data-min', '0', '--quiet']).code).toBe(0);
    const second = join(work, 'a', 'refold-2.onnx');
    expect(pleat(['fold', first, '-o', second, '--quiet']).code).toBe(0);
    const meta = metadataOf(second);
    expect(meta.filter(([k]) => k === KEY)).toHaveLength(1);
    expect(Object.fromEntries(meta)[KEY]).toBe(documentedDigest(join(work, 'a'), ['refold-1.onnx.data']));
    expect(Object.fromEntries(meta)['pleat.source.sha256']).toBe(sha(readFileSync(first)));
  });

  it('the fold and audit reports carry the digest for the HTML page (JSON valid against the schema, shown on the page)', async () => {
    const want = documentedDigest(join(work, 'a'), LOCATIONS);
    const fold = foldFile(a.model, join(work, 'paged.onnx'), { pageDetail: true });
    const audit = auditFile(a.model, { pageDetail: true });
    const validate = schemaValidator();
    for (const r of [fold, audit]) {
      expect(r.sha256).toBe(sha(a.onnx));
      expect((r as { externalSha256?: string }).externalSha256).toBe(want);
      const j = JSON.parse(toJsonText(r));
      expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
      const html = await renderJobs(r.command, [{ model: r.model, report: r, exitCode: 0 }], 'html');
      expect(html).toContain(`data-figure="externalSha256" data-value="${want}"`);
    }
    // a model without external data carries no such field
    const plain = auditFile(join(ROOT, 'models', 'tray-edge.onnx'), { pageDetail: true });
    expect('externalSha256' in plain).toBe(false);
  });

  it('compare names each side by its side files too: two models with one .onnx and different weights get different digests', () => {
    const html = join(work, 'compare.html'), json = join(work, 'compare.json');
    const r = pleat(['compare', a.model, b.model, '--report', `html:${html}`, '--report', `json:${json}`]);
    expect(r.code, r.stderr).toBe(1); // (the weights differ: the comparison fails, and both reports are written)
    const j = JSON.parse(readFileSync(json, 'utf8'));
    expect(schemaValidator()(j)).toBe(true);
    // the .onnx files are the same bytes; only the side files' digests (worked out here as the README says) tell them apart
    expect(j.sha256).toEqual({ a: sha(a.onnx), b: sha(b.onnx) });
    expect(j.externalSha256).toEqual({ a: documentedDigest(join(work, 'a'), LOCATIONS), b: documentedDigest(join(work, 'b'), LOCATIONS) });
    expect(j.externalSha256.a).not.toBe(j.externalSha256.b);
    const page = readFileSync(html, 'utf8');
    for (const side of ['a', 'b'] as const) expect(page).toContain(`data-figure="externalSha256.${side}" data-value="${j.externalSha256[side]}"`);
    // a side without external data gets no entry (B: A's model with every tensor inline, so the two agree)
    const inline = join(work, 'inline.onnx');
    expect(pleat(['fold', a.model, '-o', inline, '--unproven', '--external-data-min', String(2 ** 40), '--quiet']).code).toBe(0);
    const half = join(work, 'compare-half.json');
    expect(pleat(['compare', a.model, inline, '--report', `json:${half}`, '--report', `html:${join(work, 'compare-half.html')}`]).code).toBe(0);
    const h = JSON.parse(readFileSync(half, 'utf8'));
    expect(schemaValidator()(h)).toBe(true);
    expect(h.externalSha256).toEqual({ a: documentedDigest(join(work, 'a'), LOCATIONS) });
  });

  it('placeholders for both digests, written over once the digests are known, give the bytes written with them', () => {
    // (the fold job's path when a hash is still running as it stages the model: src/jobs/fold.ts, stage)
    const digest = sha(a.onnx), external = documentedDigest(join(work, 'a'), LOCATIONS);
    const write = (folder: string, main: string, side: string) => {
      mkdirSync(join(work, folder));
      const m = readModelFile(a.model);
      foldLoaded(m, undefined, a.model, { noProofs: true }, false);
      setProvenance(m, provenanceOf(main, undefined, { noProofs: true }, 'not-run', side));
      const out = join(work, folder, 'm.onnx');
      writeModelFile(m, out);
      return out;
    };
    const late = write('placeholders', DIGEST_PLACEHOLDER, DIGEST_PLACEHOLDER);
    expect(fillDigest(late, 'pleat.source.sha256', digest)).toBe(true);
    expect(fillDigest(late, KEY, external)).toBe(true);
    expect(readFileSync(late).equals(readFileSync(write('known', digest, external)))).toBe(true);
  });

  it('an export bundle carries the entries the folded .onnx carries, side-file digest included', () => {
    const folded = join(work, 'for-bundle.onnx');
    foldFile(a.model, folded, { seed: 3 });
    const fromFold = Object.fromEntries(metadataOf(folded).filter(([k]) => k.startsWith('pleat.')));
    expect(fromFold[KEY]).toBe(documentedDigest(join(work, 'a'), LOCATIONS));
    const manifests = [a, b].map((src, i) => {
      const dir = join(work, `bundle-${i}`);
      expect(exportFile(src.model, dir, 'safetensors', { seed: 3 }).bundle).not.toBeNull();
      const st = readFileSync(join(dir, 'weights.safetensors'));
      const n = Number(st.readBigUInt64LE(0));
      const meta = JSON.parse(st.subarray(8, 8 + n).toString('utf8')).__metadata__;
      const provenance = JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8')).provenance;
      expect(Object.fromEntries(Object.entries(meta).filter(([k]) => k.startsWith('pleat.')))).toEqual(provenance);
      return provenance;
    });
    expect(manifests[0]).toEqual(fromFold);
    expect(manifests[1][KEY]).toBe(documentedDigest(join(work, 'b'), LOCATIONS));
    expect(manifests[1][KEY]).not.toBe(manifests[0][KEY]);
    // the C bundle's manifest too
    const cdir = join(work, 'bundle-c');
    exportFile(a.model, cdir, 'c', { seed: 3 });
    expect(JSON.parse(readFileSync(join(cdir, 'manifest.json'), 'utf8')).provenance).toEqual(fromFold);
  });
});

describe('provenance of a source without external data', { timeout: 120_000 }, () => {
  // What a fold recorded before side files were covered, written out here: the same five entries, in this order.
  const recordedBefore = (src: string, status: string): Array<[string, string]> => [
    ['pleat.version', VERSION], ['pleat.source.sha256', sha(readFileSync(src))], ['pleat.check.status', status],
    ['pleat.check.gate', 'default per output type'], ['pleat.check.seed', '0'],
  ];

  it('writes exactly the bytes it wrote before (no new entry), with its output inline or in a side file', () => {
    for (const name of ['tray-edge.onnx', 'pump-vibration.onnx']) {
      const src = join(ROOT, 'models', name);
      for (const externalThreshold of [undefined, 0]) {
        const dir = mkdtempSync(join(work, 'plain-'));
        mkdirSync(join(dir, 'job')); mkdirSync(join(dir, 'want')); // one file name: a side file's location is in the .onnx
        const out = join(dir, 'job', 'm.onnx');
        foldFile(src, out, { noProofs: true, externalThreshold });
        const m = readModelFile(src);
        foldLoaded(m, undefined, src, { noProofs: true }, false);
        setProvenance(m, recordedBefore(src, 'not-run'));
        const want = join(dir, 'want', 'm.onnx');
        const { sideFiles } = writeModelFile(m, want, { externalThreshold });
        expect(readFileSync(out).equals(readFileSync(want)), `${name} ${externalThreshold}`).toBe(true);
        expect(sideFiles.length).toBe(externalThreshold === 0 ? 1 : 0);
        for (const f of sideFiles) expect(readFileSync(f.replace(join(dir, 'want'), join(dir, 'job'))).equals(readFileSync(f))).toBe(true);
        expect(metadataOf(out).filter(([k]) => k.startsWith('pleat.'))).toEqual(recordedBefore(src, 'not-run'));
      }
    }
  });

  it('a bundle of it carries the same five entries', () => {
    const src = join(ROOT, 'models', 'tray-edge.onnx');
    const dir = join(work, 'plain-bundle');
    exportFile(src, dir, 'safetensors', {});
    expect(JSON.parse(readFileSync(join(dir, 'manifest.json'), 'utf8')).provenance).toEqual(Object.fromEntries(recordedBefore(src, 'passed')));
  });
});

describe('provenance of a source with a large side file (hashed on a thread beside the fold)', () => {
  it('records the documented digest, and the same bytes as a fold whose digests were known up front', () => {
    const folder = join(work, 'large');
    mkdirSync(folder);
    // one 1024-channel 4x4 Conv: 64 MiB of float32 weight in big.bin, the norm's parameters in small.bin
    const r = rng(5);
    const g = new GraphBuilder();
    g.input('x', [1, 1024, 4, 4]).output('y');
    const w = tensor('w', [1024, 1024, 4, 4], Float32Array.from({ length: 1024 * 1024 * 16 }, (_, i) => ((i * 7919) % 2001 - 1000) * 2e-5));
    const big = Buffer.from(w.rawData!);
    const params: Buffer[] = [];
    const external = (t: onnxProto.onnx.ITensorProto, location: string, offset: number) => {
      const n = t.rawData!.length;
      delete t.rawData;
      t.dataLocation = onnxProto.onnx.TensorProto.DataLocation.EXTERNAL;
      t.externalData = [{ key: 'location', value: location }, { key: 'offset', value: String(offset) }, { key: 'length', value: String(n) }];
      g.inits.push(t);
    };
    external(w, 'big.bin', 0);
    ['s', 'b', 'm', 'v'].forEach((name, i) => {
      const values = name === 's' ? uniform(r, 1024, 0.5, 1.5) : name === 'v' ? uniform(r, 1024, 0.3, 2) : randn(r, 1024, 0.2);
      const t = tensor(name, [1024], values);
      params.push(Buffer.from(t.rawData!));
      external(t, 'small.bin', i * 4096);
    });
    const c = g.node('Conv', ['x', 'w'], {}, { name: 'conv' });
    g.node('BatchNormalization', [c, 's', 'b', 'm', 'v'], {}, { name: 'bn', outputs: ['y'] });
    writeFileSync(join(folder, 'big.bin'), big);
    writeFileSync(join(folder, 'small.bin'), Buffer.concat(params));
    const src = join(folder, 'large.onnx');
    writeFileSync(src, modelBytes(g));
    const want = documentedDigest(folder, ['big.bin', 'small.bin']);

    // (one file name in two folders: the output's weights go to its own side file, whose name the .onnx holds)
    mkdirSync(join(folder, 'late')); mkdirSync(join(folder, 'early'));
    const late = join(folder, 'late', 'out.onnx');
    expect(pleat(['fold', src, '-o', late, '--unproven', '--quiet']).code).toBe(0);
    expect(Object.fromEntries(metadataOf(late))[KEY]).toBe(want);
    const m = readModelFile(src);
    foldLoaded(m, undefined, src, { noProofs: true }, false);
    setProvenance(m, [['pleat.version', VERSION], ['pleat.source.sha256', sha(readFileSync(src))], [KEY, want], ['pleat.check.status', 'not-run'], ['pleat.check.gate', 'default per output type'], ['pleat.check.seed', '0']]);
    const early = join(folder, 'early', 'out.onnx');
    writeModelFile(m, early);
    for (const f of ['out.onnx', 'out.onnx.data']) expect(readFileSync(join(folder, 'late', f)).equals(readFileSync(join(folder, 'early', f))), f).toBe(true);
  }, 180_000);
});
