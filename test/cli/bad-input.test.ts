// Bad input gets one clear line on stderr and exit code 2, never a stack trace.
import { describe, expect, it } from 'vitest';
import { existsSync, mkdtempSync, writeFileSync, mkdirSync, readdirSync, readFileSync, symlinkSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes } from '../helpers/build.js';
import { CLI, ROOT, pleat } from '../helpers/cli.js';
import { spawnSync } from 'node:child_process';

const dir = mkdtempSync(join(tmpdir(), 'pleat-bad-'));
const file = (name: string, bytes: Uint8Array | string) => { const p = join(dir, name); writeFileSync(p, bytes); return p; };

function good(): GraphBuilder {
  const g = new GraphBuilder();
  g.input('x', [1, 2]).output('y', [1, 2]);
  g.init('s', [2], [1, 2]);
  g.node('Mul', ['x', 's'], {}, { name: 'mul', outputs: ['y'] });
  return g;
}

function expectOneLine(r: { code: number; stdout: string; stderr: string }, pattern: RegExp): void {
  expect(r.code).toBe(2);
  const lines = r.stderr.trim().split('\n');
  expect(lines).toHaveLength(1);
  expect(lines[0]).toMatch(/^pleat: /);
  expect(lines[0]).toMatch(pattern);
  expect(r.stderr).not.toMatch(/\n\s+at /); // no stack trace
}

describe('bad input: one line, exit 2', () => {
  it('missing file', () => expectOneLine(pleat(['survey', join(dir, 'nope.onnx')]), /no such file/));
  it('a directory', () => { const d = join(dir, 'adir'); mkdirSync(d); expectOneLine(pleat(['survey', d]), /is a directory/); });
  it('empty file', () => expectOneLine(pleat(['survey', file('empty.onnx', '')]), /empty/));
  it('bytes that are not a model', () => expectOneLine(pleat(['survey', file('text.onnx', 'hello, this is a text file\n')]), /not (a readable|an) ONNX model|no graph/));
  it('a truncated model', () => {
    const b = modelBytes(good());
    expectOneLine(pleat(['survey', file('trunc.onnx', b.subarray(0, b.length - 7))]), /truncated|past the end|not a readable/);
  });
  it('a node reading an undefined value', () => {
    const g = good();
    g.node('Relu', ['ghost'], {}, { name: 'r', outputs: ['z'] });
    expectOneLine(pleat(['survey', file('undef.onnx', modelBytes(g))]), /node 'r' reads 'ghost'/);
  });
  it('a cycle', () => {
    const g = new GraphBuilder();
    g.input('x', [1]).output('y', [1]);
    g.node('Add', ['x', 'b'], {}, { name: 'a', outputs: ['a_out'] });
    g.node('Relu', ['a_out'], {}, { name: 'b', outputs: ['b'] });
    g.node('Identity', ['a_out'], {}, { name: 'c', outputs: ['y'] });
    expectOneLine(pleat(['survey', file('cycle.onnx', modelBytes(g))]), /cycle/);
  });
  it('two nodes writing one value', () => {
    const g = good();
    g.node('Relu', ['x'], {}, { name: 'twin', outputs: ['y'] });
    expectOneLine(pleat(['survey', file('twowriters.onnx', modelBytes(g))]), /'y' is written by both/);
  });
  it('tensor data shorter than its dims', () => {
    const g = good();
    g.inits[0]!.dims = [3];
    expectOneLine(pleat(['survey', file('short.onnx', modelBytes(g))]), /holds 2 elements but its dims \[3\] need 3/);
  });
  it('an unknown data type', () => {
    const g = good();
    g.inits[0]!.dataType = 77;
    expectOneLine(pleat(['survey', file('dtype.onnx', modelBytes(g))]), /unknown data type 77/);
  });
  it('a model with no opset import is refused', () => {
    const m = onnxProto.onnx.ModelProto.encode({ irVersion: 8, graph: good().graph() }).finish();
    expectOneLine(pleat(['survey', file('noopset.onnx', m)]), /opset/);
  });
  it('an unknown command or flag is a usage error', () => {
    expectOneLine(pleat(['bogus']), /./);
    expectOneLine(pleat(['survey', file('ok.onnx', modelBytes(good())), '--nope']), /nope/i);
  });
});

describe('survey', () => {
  it('reports IR version, opsets, symbolic dims, op counts, weights and norms', () => {
    const g = new GraphBuilder();
    g.input('image', ['batch', 3, 4, 4]).output('y', ['batch', 3, 4, 4]);
    for (const [n, v] of [['sc', [1, 1, 1]], ['sh', [0, 0, 0]], ['mu', [0.1, 0.2, 0.3]], ['va', [1, 2, 3]]] as const) g.init(n, [3], v);
    g.node('BatchNormalization', ['image', 'sc', 'sh', 'mu', 'va'], {}, { name: 'bn', outputs: ['b'] });
    g.node('Relu', ['b'], {}, { name: 'r', outputs: ['y'] });
    const p = file('survey.onnx', modelBytes(g, { producer: 'test-exporter' }));
    const r = pleat(['survey', p, '--json']);
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.irVersion).toBe(8);
    expect(j.opsets).toEqual([{ domain: 'ai.onnx', version: 17 }]);
    expect(j.producer.name).toBe('test-exporter');
    expect(j.inputs).toEqual([{ name: 'image', type: 'float32', dims: ['batch', 3, 4, 4] }]);
    expect(j.opCounts).toEqual([{ op: 'BatchNormalization', count: 1 }, { op: 'Relu', count: 1 }]);
    expect(j.initializers).toEqual({ count: 4, bytes: 48 });
    expect(j.normalizations).toEqual([{ op: 'BatchNormalization', count: 1 }]);
    const t = pleat(['survey', p]);
    expect(t.code).toBe(0);
    expect(t.stdout).toMatch(/image\s+float32 \[batch x 3 x 4 x 4\]/);
    expect(t.stdout).toMatch(/BatchNormalization 1/);
    expect(j.evaluator).toEqual({ runsAll: true, cannotRun: [] });
    expect(t.stdout).toMatch(/check\s+the evaluator can run every operator/);
  });

  it('lists the operators the evaluator cannot run, so the user knows the whole-model check cannot run', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y').output('z');
    g.node('Relu', ['x'], {}, { name: 'r', outputs: ['a'] });
    g.node('NotAnOnnxOp', ['a'], {}, { name: 'u', outputs: ['y'] });
    g.node('Bernoulli', ['x'], {}, { name: 'b', outputs: ['z'] });
    const p = file('gaps.onnx', modelBytes(g));
    const j = JSON.parse(pleat(['survey', p, '--json']).stdout);
    expect(j.evaluator).toEqual({
      runsAll: false,
      cannotRun: [{ op: 'Bernoulli', opset: 17, count: 1, reason: 'random' }, { op: 'NotAnOnnxOp', opset: 17, count: 1, reason: 'no-kernel' }],
    });
    const t = pleat(['survey', p]);
    expect(t.code).toBe(0);
    expect(t.stdout).toMatch(/check\s+the evaluator cannot run these operators, so the whole-model check will be skipped/);
    expect(t.stdout).toMatch(/NotAnOnnxOp \(opset 17\) x1: no kernel/);
    expect(t.stdout).toMatch(/Bernoulli \(opset 17\) x1: random draws/);
  });
});

describe('output problems', () => {
  it('an output folder that does not exist: one line, exit 2, nothing left behind', () => {
    const p = file('ok-out.onnx', modelBytes(good()));
    const r = pleat(['fold', p, '-o', join(dir, 'missing', 'out.onnx')]);
    expectOneLine(r, /the folder .*missing does not exist/);
  });
  it('an output that is the input: refused, the input unchanged', () => {
    const p = file('same.onnx', modelBytes(good()));
    const before = readFileSync(p);
    expectOneLine(pleat(['fold', p, '-o', p]), /refusing to overwrite the input model/);
    expect(readFileSync(p).equals(before)).toBe(true);
  });
  // Two --report files of different formats spelled alike were claimed under one label, which the output set took
  // for the same step claiming its file again: exit 0, and the file held whichever report was written last.
  it('two --report formats into one file: refused before any work, naming both, nothing written', () => {
    const p = file('two-formats.onnx', modelBytes(good()));
    const report = join(dir, 'two-formats.out');
    const r = pleat(['fold', p, '-o', join(dir, 'two-formats.folded.onnx'), '--report', `json:${report}`, '--report', `markdown:${report}`]);
    expectOneLine(r, /--report \(markdown\) .*two-formats\.out is also written as --report \(json\) .*two-formats\.out/);
    expect(existsSync(report)).toBe(false);
    expect(existsSync(join(dir, 'two-formats.folded.onnx'))).toBe(false);
    expectOneLine(pleat(['audit', p, '--report', `text:${report}`, '--report', `junit:${report}`]), /--report \(junit\) .* is also written as --report \(text\)/);
  });
  // A batch whose inputs share a file name named the name only: the user had to find which two inputs it meant.
  it('two batch inputs of one file name: refused naming both paths', () => {
    mkdirSync(join(dir, 'twin-a')); mkdirSync(join(dir, 'twin-b')); mkdirSync(join(dir, 'twin-out'));
    const a = file('twin-a/m.onnx', modelBytes(good())), b = file('twin-b/m.onnx', modelBytes(good()));
    expectOneLine(pleat(['fold', a, b, '--out-dir', join(dir, 'twin-out')]), /twin-a\/m\.onnx and .*twin-b\/m\.onnx are both named 'm\.onnx'/);
    expect(readdirSync(join(dir, 'twin-out'))).toEqual([]);
  });
  it('an empty model path is named as such', () => expectOneLine(pleat(['audit', '']), /^pleat: '' \(an empty path\)/));
  it('an empty model path is named as such with --out-dir too, before the folder is made', () => {
    const out = join(dir, 'nameless-out');
    expectOneLine(pleat(['fold', '', 'models/pump-vibration.onnx', '--out-dir', out]), /^pleat: '' \(an empty path\)/);
    expect(existsSync(out)).toBe(false);
  });
});

// statSync throws for a loop of symbolic links or a path through a file even when told a missing entry is fine:
// the guards that compare outputs with inputs let it through as an internal error (exit 3).
describe('paths that cannot be followed: one line, exit 2', () => {
  const loop = join(dir, 'loop-a.onnx');
  symlinkSync(join(dir, 'loop-b.onnx'), loop);
  symlinkSync(loop, join(dir, 'loop-b.onnx'));
  const plain = file('plain-file', 'x');
  const model = 'models/pump-vibration.onnx';
  const cases: Array<[string, string[], RegExp]> = [
    ['audit of a link loop', ['audit', loop], /loop-a\.onnx: a loop of symbolic links \(ELOOP\)/],
    ['fold of a link loop', ['fold', loop, '-o', join(dir, 'z.onnx')], /loop-a\.onnx: a loop of symbolic links/],
    ['compare with a link loop', ['compare', loop, model], /loop-a\.onnx: a loop of symbolic links/],
    ['-o a link loop', ['fold', model, '-o', loop], /^pleat: -o .*loop-a\.onnx: a loop of symbolic links/],
    ['--report a link loop', ['audit', model, '--report', `json:${loop}`], /^pleat: --report .*loop-a\.onnx: a loop of symbolic links/],
    ['a model path through a file', ['audit', join(plain, 'm.onnx')], /m\.onnx: a part of the path is a file, not a folder \(ENOTDIR\)/],
  ];
  for (const [what, args, msg] of cases) it(what, () => expectOneLine(pleat(args), msg));
});

// A path holding a line break split the one line in two (a script reading the first line of stderr lost the rest):
// control characters in a message are shown escaped.
describe('a message stays one line whatever the path holds', () => {
  for (const name of ['bad\nline.onnx', 'tab\there\r.onnx', 'esc\u001b[31m.onnx']) {
    it(JSON.stringify(name), () => {
      const p = file(name, 'not a model');
      for (const cmd of [['survey', p], ['audit', p], ['fold', p, '-o', join(dir, 'never.onnx')]]) {
        const r = pleat(cmd);
        expectOneLine(r, /not an ONNX model|not a readable ONNX model/);
        expect(r.stderr).toContain(JSON.stringify(name).slice(1, -1).replace('\\u001b', '\\x1b'));
      }
    });
  }
});

// fold's check names its two models as fold knows them; it said "model B (x.onnx)", compare's words
describe("a fold check's error names the original or the folded model", () => {
  it('a Conv whose weight input is empty', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2, 3, 3]).output('y', [1, 2, 3, 3]);
    g.init('b', [2], [0.1, 0.2]);
    const c = g.node('Conv', ['x', '', 'b'], {}, { name: 'conv' });
    g.node('BatchNormalization', [c, g.init('s', [2], [1, 2]), g.init('t', [2], [0, 1]), g.init('m', [2], [0, 0]), g.init('v', [2], [1, 1])], {}, { name: 'bn', outputs: ['y'] });
    const p = file('empty-weight.onnx', modelBytes(g));
    const r = pleat(['fold', p, '-o', join(dir, 'empty-weight.folded.onnx'), '--quiet']);
    expectOneLine(r, /^pleat: the (original|folded) model \(empty-weight(\.folded)?\.onnx\), float64 run: node 'conv' \(Conv\): required input 1 \(W\) is missing/);
  });
});

// The argument parser asks for the working folder while it loads: a folder removed under the shell was an
// internal error (exit 3), even for --help.
describe('a working folder that no longer exists', () => {
  it('is one line and exit 2', () => {
    const gone = mkdtempSync(join(tmpdir(), 'pleat-gone-'));
    const r = spawnSync('sh', ['-c', `cd '${gone}' && rmdir '${gone}' && exec '${process.execPath}' '${CLI}' survey '${join(ROOT, 'models', 'pump-vibration.onnx')}'`], { encoding: 'utf8' });
    expect(r.status).toBe(2);
    expect(r.stderr).toBe('pleat: the working folder no longer exists (ENOENT); run pleat from an existing folder\n');
  });
});
