// The whole-model check on models the evaluator could not run before: an audio-style model (Conv1d ->
// BatchNormalization -> bidirectional LSTM) now gets a real check instead of a skip, and a model that draws
// random numbers is skipped with that reason. The folded LSTM model is also compared with the original in
// onnxruntime-node (graph optimizations off).
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, randn, rng, uniform, saveModel } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)

function audioModel(withRandom: boolean): GraphBuilder {
  const r = rng(5);
  const g = new GraphBuilder();
  g.input('frames', [1, 4, 12]);
  g.output('y');
  g.init('cw', [6, 4, 3], randn(r, 72, 0.4));
  g.init('cb', [6], randn(r, 6, 0.1));
  g.init('scale', [6], uniform(r, 6, 0.5, 1.5));
  g.init('shift', [6], randn(r, 6, 0.2));
  g.init('mean', [6], randn(r, 6, 0.3));
  g.init('var', [6], uniform(r, 6, 0.2, 2));
  g.init('W', [2, 20, 6], randn(r, 240, 0.4));
  g.init('R', [2, 20, 5], randn(r, 200, 0.4));
  g.init('B', [2, 40], randn(r, 80, 0.1));
  g.node('Conv', ['frames', 'cw', 'cb'], { pads: [1, 1] }, { outputs: ['c'] });
  g.node('BatchNormalization', ['c', 'scale', 'shift', 'mean', 'var'], {}, { outputs: ['n'] });
  g.node('Transpose', ['n'], { perm: [2, 0, 1] }, { outputs: ['seq'] }); // [time, batch, features]
  if (withRandom) {
    g.node('RandomUniformLike', ['seq'], {}, { outputs: ['noise'] });
    g.node('Add', ['seq', 'noise'], {}, { outputs: ['seq2'] });
  }
  g.node('LSTM', [withRandom ? 'seq2' : 'seq', 'W', 'R', 'B'], { hidden_size: 5, direction: 'bidirectional' }, { outputs: ['y'] });
  return g;
}

describe('whole-model check with recurrent and random operators', () => {
  it('a Conv1d -> BatchNormalization -> bidirectional LSTM model is folded and checked (not skipped)', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-lstm-'));
    const src = saveModel(join(dir, 'audio.onnx'), audioModel(false), { opset: 14 });
    const out = join(dir, 'folded.onnx');
    const rep = foldFile(src, out, {});
    expect(rep.check!.skipped).toBeNull();
    expect(rep.check!.status).toBe('passed');
    expect(rep.check!.passed).toBe(true);
    expect(rep.check!.probes).toBeGreaterThan(0);
    expect(rep.failed).toBe(false);
    // Source: onnxruntime-node on the original and the folded file
    const x = randn(rng(8), 48);
    const a = await runOrt(readFileSync(src), { frames: { dims: [1, 4, 12], data: x } });
    const b = await runOrt(readFileSync(out), { frames: { dims: [1, 4, 12], data: x } });
    const d = maxDiff(b.y!.data, a.y!.data);
    expect(d.maxAbs).toBeLessThanOrEqual(1e-5 * Math.max(1, d.scale));
  });

  it('a model with RandomUniformLike is skipped with the random-number reason', () => {
    const dir = mkdtempSync(join(tmpdir(), 'pleat-rand-'));
    const src = saveModel(join(dir, 'noisy.onnx'), audioModel(true), { opset: 14 });
    const rep = foldFile(src, join(dir, 'folded.onnx'), {});
    expect(rep.check!.status).toBe('skipped');
    expect(rep.check!.passed).toBe(false);
    expect(rep.check!.skipped!.reason).toBe('random-op');
    expect(rep.check!.skipped!.message).toMatch(/'RandomUniformLike' draws random numbers, so the whole-model check cannot compare two runs/);
  });
});
