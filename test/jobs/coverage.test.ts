// Coverage of the whole-model check and per-fold proof figures, through the fold job on files:
// - folded layers inside an If branch the seeded probes never take: coverage 0/1 named, after the bounded extra
//   probes; the fold itself still carries proof figures measured on its branch region;
// - a branch a later seeded probe takes: the extra probes stop as soon as every rewritten node ran;
// - a saturated output (a sigmoid at exactly 1.0 in float64): bit-identical although the rewritten layer upstream
//   ran, so it is reported as not observable, while an unsaturated output is observable.
// Invented models in our own scenario (a sorting-line camera); thresholds follow from the seeded probes.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { probeValue } from '../../src/verify/inputs.js';
import { DEFAULT_EXTRA_PROBES } from '../../src/verify/compare.js';
import { foldText } from '../../src/report/ledger-text.js';
import { DataType } from '../../src/graph/ir.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-coverage-'));
const save = (name: string, bytes: Uint8Array) => { const p = join(dir, name); writeFileSync(p, bytes); return p; };

function bnParams(g: GraphBuilder, name: string, c: number, seed: number): string[] {
  const r = rng(seed);
  return [
    g.init(`${name}_scale`, [c], uniform(r, c, 0.5, 1.5)),
    g.init(`${name}_shift`, [c], randn(r, c, 0.2)),
    g.init(`${name}_mean`, [c], randn(r, c, 0.3)),
    g.init(`${name}_var`, [c], uniform(r, c, 0.2, 2)),
  ];
}

/** y = If(max(x) > threshold, then: conv+bn (folds), else: plain conv). */
function branchModel(threshold: number): Uint8Array {
  const branch = (name: string, withBn: boolean) => {
    const b = new GraphBuilder(name);
    b.output(`${name}_y`, [1, 4, 4, 4]);
    const c = b.node('Conv', ['x', `${name}_w`], {}, { name: `${name}_conv`, outputs: withBn ? undefined : [`${name}_y`] });
    b.init(`${name}_w`, [4, 3, 1, 1], randn(rng(name.length), 12, 0.5));
    if (withBn) b.node('BatchNormalization', [c, ...bnParams(b, `${name}_bn`, 4, 7)], {}, { name: `${name}_bn`, outputs: [`${name}_y`] });
    return b;
  };
  const g = new GraphBuilder();
  g.input('x', [1, 3, 4, 4]).output('y', [1, 4, 4, 4]);
  const m = g.node('ReduceMax', ['x'], { keepdims: 0 }, { name: 'peak' });
  const cond = g.node('Greater', [m, g.init('threshold', [], [threshold])], {}, { name: 'bright' });
  g.node('If', [cond], { then_branch: branch('then', true), else_branch: branch('else', false) }, { name: 'gate_if', outputs: ['y'] });
  return modelBytes(g);
}

/** Peak of the seeded probe number p of input x (seed 0), as the check draws it. */
const probePeak = (p: number) => Math.max(...probeValue({ name: 'x', type: DataType.FLOAT, dims: [1, 3, 4, 4] }, 0, p).data);

describe('coverage of rewritten nodes', { timeout: 120_000 }, () => {
  it('a branch no probe takes: coverage 0/1 names the layer after the bounded extra probes; its proof ran on the branch region', () => {
    const m = save('never.onnx', branchModel(1e6));
    const r = foldFile(m, join(dir, 'never.out.onnx'));
    const then = r.normalizations.find((e) => e.node === 'then_bn')!;
    expect(then.status).toBe('folded');
    // the per-fold proof ran on the branch region whatever the probes did
    expect(then.proof!.shape).toHaveLength(4);
    expect(then.proof!.shape[1]).toBe(3); // the branch conv's input channels
    expect(then.proof!.maxAbs).toBeGreaterThan(0); // the folded weights are rounded to float32 once
    expect(then.proof!.maxAbs).toBeLessThan(1e-5);
    expect(Number.isFinite(then.proof!.maxRel)).toBe(true);
    const c = r.check!;
    expect(c.status).toBe('passed');
    expect(c.coverage).toEqual({ executed: 0, total: 1, missed: ['then_conv in main/gate_if.then_branch'], extraProbes: DEFAULT_EXTRA_PROBES });
    expect(c.probes).toBe(2 + DEFAULT_EXTRA_PROBES);
    // nothing rewritten ran upstream of y, so its agreement says nothing about the fold: no observability claim
    expect(c.outputs[0]!.observable).toBeUndefined();
    const t = foldText(r);
    expect(t).toMatch(/coverage 0\/1: never executed by any probe \(after 8 extra probes\): then_conv in main\/gate_if\.then_branch/);
  });

  it('a branch a later seeded probe takes: extra probes stop once every rewritten node ran', () => {
    const first = Math.max(probePeak(0), probePeak(1));
    const later = Array.from({ length: DEFAULT_EXTRA_PROBES }, (_, k) => probePeak(2 + k));
    const hit = later.findIndex((v) => v > first);
    expect(hit).toBeGreaterThanOrEqual(0); // precondition on the seeded stream, so the case means something
    const m = save('later.onnx', branchModel((first + later[hit]!) / 2));
    const r = foldFile(m, join(dir, 'later.out.onnx'));
    const c = r.check!;
    expect(c.coverage).toEqual({ executed: 1, total: 1, missed: [], extraProbes: hit + 1 });
    expect(c.probes).toBe(2 + hit + 1);
    expect(c.status).toBe('passed');
    expect(c.outputs[0]!.observable).toBe(true);
  });

  it('a Loop body: coverage counts the folded layer only when the body runs (0 trips: never; 2 trips: executed)', () => {
    const loopModel = (trips: number) => {
      const body = new GraphBuilder('body');
      body.input('i', [], 7).input('c', [], 9).input('v', [1, 4, 4, 4]);
      body.output('c_out', [], 9).output('v_out', [1, 4, 4, 4]);
      body.node('Identity', ['c'], {}, { name: 'keep_going', outputs: ['c_out'] });
      body.init('lw', [4, 4, 1, 1], randn(rng(11), 16, 0.5));
      const c = body.node('Conv', ['v', 'lw'], {}, { name: 'step_conv' });
      body.node('BatchNormalization', [c, ...bnParams(body, 'step_bn', 4, 12)], {}, { name: 'step_bn', outputs: ['v_out'] });
      const g = new GraphBuilder();
      g.input('x', [1, 4, 4, 4]).output('y', [1, 4, 4, 4]);
      g.init('trips', [], [trips], 7); g.init('go', [], [1], 9);
      g.node('Loop', ['trips', 'go', 'x'], { body }, { name: 'refine', outputs: ['y'] });
      return modelBytes(g);
    };
    const never = foldFile(save('loop0.onnx', loopModel(0)), join(dir, 'loop0.out.onnx'));
    expect(never.normalizations.find((e) => e.node === 'step_bn')!.status).toBe('folded');
    expect(never.check!.coverage).toEqual({ executed: 0, total: 1, missed: ['step_conv in main/refine.body'], extraProbes: DEFAULT_EXTRA_PROBES });
    const twice = foldFile(save('loop2.onnx', loopModel(2)), join(dir, 'loop2.out.onnx'));
    expect(twice.check!.coverage).toEqual({ executed: 1, total: 1, missed: [], extraProbes: 0 });
    expect(twice.check!.outputs[0]!.observable).toBe(true);
  });

  it('a saturated output is reported as not observable; an unsaturated one beside it as observable', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('sure', [1, 4, 4, 4]).output('score', [1, 4, 4, 4]);
    g.init('w', [4, 3, 1, 1], randn(rng(3), 12, 0.1));
    g.init('bias', [4], [120, 130, 140, 150]);
    const c = g.node('Conv', ['x', 'w', 'bias'], {}, { name: 'sat_conv' });
    const b = g.node('BatchNormalization', [c, ...bnParams(g, 'sat_bn', 4, 5)], {}, { name: 'sat_bn' });
    g.node('Sigmoid', [b], {}, { name: 'squash', outputs: ['sure'] });
    g.init('w2', [4, 3, 1, 1], randn(rng(4), 12, 0.5));
    const c2 = g.node('Conv', ['x', 'w2'], {}, { name: 'score_conv' });
    g.node('BatchNormalization', [c2, ...bnParams(g, 'score_bn', 4, 6)], {}, { name: 'score_bn', outputs: ['score'] });
    const r = foldFile(save('sat.onnx', modelBytes(g)), join(dir, 'sat.out.onnx'));
    const chk = r.check!;
    expect(chk.status).toBe('passed');
    expect(chk.coverage).toMatchObject({ executed: 2, total: 2, missed: [] });
    const sure = chk.outputs.find((o) => o.name === 'sure')!;
    expect(sure.maxAbs).toBe(0);
    expect(sure.observable).toBe(false);
    expect(chk.outputs.find((o) => o.name === 'score')!.observable).toBe(true);
    expect(foldText(r)).toMatch(/sure\s+pass .*not observable: bit-identical on every probe although a rewritten node upstream ran/);
  });
});
