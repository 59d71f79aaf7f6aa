// Issue 11 item 14: one way of saying each thing on every command. Outside check: JSON validated with ajv
// against the shipped schema; the opset bound is the newest opset of onnx 1.12.0 (Debian python3-onnx,
// onnx.defs.onnx_opset_version() = 17).
import { describe, expect, it } from 'vitest';
import { existsSync, mkdirSync, mkdtempSync, renameSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { SCHEMA_VERSION } from '../../src/jobs/types.js';
import { readModelFile } from '../../src/onnx/read.js';
import { foldText } from '../../src/report/ledger-text.js';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { pleat, ROOT } from '../helpers/cli.js';
import { schemaValidator } from '../report/helpers.js';
import { foldReport } from '../report/fixtures.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-consistency-'));
const EDGE = join(ROOT, 'models', 'tray-edge.onnx');
const SORTER = join(ROOT, 'models', 'tray-sorter.onnx');
const validate = schemaValidator();

/** Conv (no bias) -> BatchNormalization, at a chosen opset. */
function convBn(opset = 17): Uint8Array {
  const r = rng(5);
  const g = new GraphBuilder();
  g.input('x', [1, 2, 4, 4]).output('y', [1, 2, 4, 4]);
  g.init('w', [2, 2, 1, 1], randn(r, 4));
  g.init('s', [2], uniform(r, 2, 0.5, 1.5)); g.init('b', [2], randn(r, 2));
  g.init('m', [2], randn(r, 2)); g.init('v', [2], uniform(r, 2, 0.5, 2));
  g.node('Conv', ['x', 'w'], {}, { name: 'conv', outputs: ['c'] });
  g.node('BatchNormalization', ['c', 's', 'b', 'm', 'v'], {}, { name: 'bn', outputs: ['y'] });
  return modelBytes(g, { opset });
}

describe('consistency of reports and messages', () => {
  it('survey JSON has schemaVersion and validates against the schema', () => {
    const r = pleat(['survey', EDGE, '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.schemaVersion).toBe(SCHEMA_VERSION);
    expect(j.command).toBe('survey');
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
  });

  it('survey text: plain ir and opsets lines, no format key', () => {
    const r = pleat(['survey', EDGE]);
    expect(r.stdout).toMatch(/^ {2}ir {8}8$/m);
    expect(r.stdout).toMatch(/^ {2}opsets {4}ai\.onnx 17$/m);
    expect(r.stdout).not.toMatch(/format/);
  });

  it('evaluate JSON names output dtypes as it names input dtypes', () => {
    const r = pleat(['evaluate', EDGE, '--save', join(dir, 'ev'), '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.inputs[0].dtype).toBe('float32');
    expect(j.outputs[0].dtype).toBe('float32');
  });

  it('hint holds a hint only for kept norms; folded and foldable ones carry their effect', () => {
    const f = JSON.parse(pleat(['fold', SORTER, '-o', join(dir, 's.onnx'), '--dim', 'batch=1', '--json']).stdout);
    expect(validate(f), JSON.stringify(validate.errors)).toBe(true);
    const a = JSON.parse(pleat(['audit', SORTER, '--json']).stdout);
    expect(validate(a), JSON.stringify(validate.errors)).toBe(true);
    for (const e of [...f.normalizations, ...a.normalizations]) {
      if (e.status === 'kept') { expect(e.hint).toEqual(expect.any(String)); expect(e.effect).toBeNull(); }
      else { expect(e.hint).toBeNull(); expect(e.effect).toMatch(/scales the (output|input) channels/); }
    }
  });

  it('paths are printed as given (evaluate, export, fold --out-dir)', () => {
    mkdirSync(join(dir, 'p'), { recursive: true });
    const cwd = join(dir, 'p');
    const ev = pleat(['evaluate', EDGE, '--save', './out/../ev/'], { cwd });
    expect(ev.code).toBe(0);
    expect(ev.stdout).toContain('-> ./out/../ev/edge_mask.npy');
    mkdirSync(join(cwd, 'b')); // (export creates the bundle folder, not the folders above it)
    const ex = pleat(['export', EDGE, '--bundle', './b/./x'], { cwd });
    expect(ex.code).toBe(0);
    expect(ex.stdout).toContain('bundle safetensors -> ./b/./x:');
    expect(ex.stdout).toContain('wrote ./b/./x/weights.safetensors');
    const fo = pleat(['fold', EDGE, SORTER, '--out-dir', './od/', '--dim', 'batch=1'], { cwd });
    expect(fo.code).toBe(0);
    expect(fo.stdout).toContain('-> ./od/tray-edge.onnx');
  });

  it('a bias pleat creates is named after its layer', () => {
    const src = join(dir, 'convbn.onnx');
    writeFileSync(src, convBn());
    const out = join(dir, 'convbn.folded.onnx');
    expect(pleat(['fold', src, '-o', out]).code).toBe(0);
    expect(readModelFile(out).graph.initializers.map((t) => t.name)).toContain('conv.bias');
  });

  it('survey of a model whose side file is missing shows the structure and names the missing data', () => {
    const d = join(dir, 'ext');
    mkdirSync(d);
    const model = join(d, 'm.onnx');
    expect(pleat(['fold', EDGE, '-o', model, '--external-data-min', '100']).code).toBe(0);
    expect(existsSync(`${model}.data`)).toBe(true);
    renameSync(`${model}.data`, join(d, 'elsewhere.data'));
    const r = pleat(['survey', model]);
    expect(r.code).toBe(2);
    expect(r.stdout).toMatch(/inputs {4}image {2}float32/);
    expect(r.stdout).toMatch(/missing {3}\S+: 'm\.onnx\.data' cannot be opened \(no such file\)/);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/m\.onnx: tensor '\S+' has external data in 'm\.onnx\.data'/);
    const j = JSON.parse(pleat(['survey', model, '--json']).stdout);
    expect(j.missingData.length).toBeGreaterThan(0);
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
  });

  it('audit prints no probe caution (it runs no probes); fold still does', () => {
    expect(pleat(['audit', EDGE]).stdout).not.toMatch(/Caution|probe/);
    expect(pleat(['audit', EDGE, '--format', 'markdown']).stdout).not.toMatch(/Caution/);
    expect(pleat(['fold', EDGE, '-o', join(dir, 'e.onnx')]).stdout).toMatch(/^Caution:/m);
  });

  it('--shape also takes commas', () => {
    const r = pleat(['evaluate', SORTER, '--save', join(dir, 'evc'), '--shape', 'image=1,3,64,64', '--json']);
    expect(r.code).toBe(0);
    expect(JSON.parse(r.stdout).inputs[0].dims).toEqual([1, 3, 64, 64]);
  });

  for (const opset of [0, -1, 18, 99]) {
    it(`opset ai.onnx ${opset} is refused by name on every command that runs the model`, () => {
      const src = join(dir, `opset${opset}.onnx`);
      writeFileSync(src, convBn(opset));
      for (const args of [['fold', src, '-o', join(dir, 'never.onnx')], ['audit', src], ['compare', src, src], ['evaluate', src, '--save', join(dir, 'never')], ['export', src, '--bundle', join(dir, 'never-b')]]) {
        const r = pleat(args);
        expect(r.stderr, args[0]).toMatch(new RegExp(`opset ai\\.onnx ${opset} is not supported \\(pleat knows ai\\.onnx opsets 1 to 17\\)`));
        expect(r.code, args[0]).toBe(2);
      }
      expect(existsSync(join(dir, 'never.onnx'))).toBe(false);
    });
  }

  it('when folding grows the weights, the totals say so', () => {
    const t = foldText(foldReport({ bytesBefore: 496, bytesAfter: 880, nodesBefore: 5, nodesAfter: 7 }));
    expect(t).toMatch(/2 nodes added \(5 -> 7\); weights grew by 384 B \(496 B -> 880 B\)/);
    expect(t).not.toMatch(/saved/);
    expect(foldText(foldReport())).toMatch(/4 nodes removed \(41 -> 37\); 200 B of weights saved/);
  });
});
