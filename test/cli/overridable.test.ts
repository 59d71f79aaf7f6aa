// Weights that are also graph inputs are defaults a caller may replace: fold keeps them unless told otherwise.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, writeFileSync, existsSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { pleat } from '../helpers/cli.js';

describe('--allow-overridable', () => {
  it('keeps a norm whose layer weight is an overridable input, and folds it only with the flag', { timeout: 60_000 }, () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-ovr-'));
    const r = rng(5);
    const g = new GraphBuilder();
    g.input('x', [1, 3, 6, 6]).input('W', [4, 3, 3, 3]).output('y', [1, 4, 4, 4]);
    g.init('W', [4, 3, 3, 3], randn(r, 108));
    g.init('s', [4], uniform(r, 4, 0.5, 1.5)); g.init('b', [4], randn(r, 4)); g.init('m', [4], randn(r, 4)); g.init('v', [4], uniform(r, 4, 0.5, 2));
    const c = g.node('Conv', ['x', 'W'], {}, { name: 'conv' });
    g.node('BatchNormalization', [c, 's', 'b', 'm', 'v'], {}, { name: 'bn', outputs: ['y'] });
    const src = join(dir, 'm.onnx');
    writeFileSync(src, modelBytes(g));

    const kept = pleat(['fold', src, '-o', join(dir, 'kept.onnx'), '--json']);
    expect(kept.code).toBe(0);
    const k = JSON.parse(kept.stdout);
    expect(k.normalizations.map((n: { status: string; reason: string }) => [n.status, n.reason])).toEqual([['kept', 'overridable-weights']]);

    const audit = JSON.parse(pleat(['audit', src, '--json', '--allow-overridable']).stdout);
    expect(audit.normalizations[0].status).toBe('foldable');
    const folded = pleat(['fold', src, '-o', join(dir, 'folded.onnx'), '--json', '--allow-overridable']);
    expect(folded.code).toBe(0);
    expect(JSON.parse(folded.stdout).normalizations[0].status).toBe('folded');
    expect(existsSync(join(dir, 'folded.onnx'))).toBe(true);
  });
});
