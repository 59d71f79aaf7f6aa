// Read-time validation against the ONNX IR rules (issue 11 item 3): each invalid model is refused as bad-model
// (exit 2, one line) before any fold, and the ONNX standard's own checker (Debian python3-onnx,
// onnx.checker.check_model with full_check=True, see test/helpers/checker.ts) rejects each one too.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, tensor } from '../helpers/build.js';
import { pleat } from '../helpers/cli.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';
import { parseModel } from '../../src/onnx/read.js';
import { PleatError } from '../../src/errors.js';

/** Conv + BatchNormalization, foldable, so a pleat that accepted the model would fold it and exit 0. */
function convBn(): GraphBuilder {
  const g = new GraphBuilder();
  g.input('x', [1, 2, 4, 4]).output('y', [1, 2, 4, 4]);
  g.init('w', [2, 2, 1, 1], [1, 0, 0, 1]);
  g.init('scale', [2], [2, 3]);
  g.init('bias', [2], [0.5, -0.5]);
  g.init('mean', [2], [0.1, 0.2]);
  g.init('var', [2], [1, 4]);
  g.node('Conv', ['x', 'w'], {}, { name: 'c1.conv', outputs: ['c'] });
  g.node('BatchNormalization', ['c', 'scale', 'bias', 'mean', 'var'], {}, { name: 'c1.bn', outputs: ['y'] });
  return g;
}

const cases: Array<[string, () => GraphBuilder, RegExp]> = [
  ['two initializers with one name', () => {
    const g = convBn();
    g.inits.push(tensor('scale', [2], [5, 7]));
    return g;
  }, /value 'scale' is written by both initializer 'scale' and initializer 'scale'/],
  ['a value defined by an initializer and a node output', () => {
    const g = convBn();
    g.init('c', [1, 2, 4, 4], new Array(32).fill(0));
    return g;
  }, /value 'c' is written by both initializer 'c' and node 'c1.conv'/],
  ['a value defined by two nodes', () => {
    const g = convBn();
    g.node('Relu', ['x'], {}, { name: 'r', outputs: ['c'] });
    return g;
  }, /value 'c' is written by both node 'c1.conv' and node 'r'/],
  ['a tensor with both raw_data and float_data', () => {
    const g = convBn();
    const t = g.inits.find((i) => i.name === 'scale')!;
    t.floatData = [9, 9];
    return g;
  }, /tensor 'scale' holds its data in both float_data and raw_data/],
];

describe('ONNX IR rules at read time', () => {
  for (const [what, build, message] of cases) {
    it(`refuses ${what}, as the ONNX checker does`, () => {
      const dir = mkdtempSync(join(tmpdir(), 'pleat-valid-'));
      const path = join(dir, 'm.onnx');
      const bytes = modelBytes(build());
      writeFileSync(path, bytes);
      expect(() => parseModel(bytes, dir, 'm.onnx')).toThrow(PleatError);
      const r = pleat(['fold', path, '-o', join(dir, 'out.onnx')]);
      expect(r.code).toBe(2);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
      expect(r.stderr).toMatch(message);
      // source: the ONNX checker (python3-onnx) rejects the same file
      if (checkerAvailable()) expect(onnxCheck(path)).not.toBe('');
    });
  }

  it('still accepts an initializer that gives a graph input its default (IR 4+), as the checker does', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-valid-'));
    const g = convBn();
    g.input('scale', [2]);
    const path = join(dir, 'm.onnx');
    writeFileSync(path, modelBytes(g));
    expect(pleat(['survey', path]).code).toBe(0);
    if (checkerAvailable()) expect(onnxCheck(path)).toBe('');
  });
});
