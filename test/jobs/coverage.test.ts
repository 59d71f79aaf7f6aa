// Coverage of the whole-model check and per-fold proof figures, through the fold job on files:
// - folded layers inside an If branch the seeded probes never take: coverage 0/1 named, after the bounded extra
//   probes; the fold itself still carries proof figures measured on its branch region;
// - a branch a later seeded probe takes: the extra probes stop as soon as every rewritten node ran;
// - a saturated output (a sigmoid at exactly 1.0 in float64): bit-identical although the rewritten layer upstream
//   ran, so it is reported as not observable, while an unsaturated output is observable;
// - layers --equalize changed count as rewritten like folded ones: in an untaken branch (0/2, named, extra probes),
//   in the main graph (2/2, observable), and once when a layer is both folded and equalized;
// - --clone-shared: the copy is the rewritten node, not the original, so an output the original alone feeds makes
//   no observability claim (JSON report written by the CLI, library result and text ledger).
// Invented models in our own scenario (a sorting-line camera); thresholds follow from the seeded probes.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, randn, rng, uniform } from '../helpers/build.js';
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { probeValue } from '../../src/verify/inputs.js';
import { DEFAULT_EXTRA_PROBES } from '../../src/verify/compare.js';
import { foldText } from '../../src/report/ledger-text.js';
import { DataType } from '../../src/graph/ir.js';
import { pleat } from '../helpers/cli.js';

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

/**
 * A Conv whose output channels span a thousand-fold range (invented weights), then Relu, then a second Conv: the
 * pair --equalize balances (Nagel et al. 2019, arXiv:1906.04721, section 4.1). No normalization, so only
 * equalization rewrites anything. `g` is the graph or branch that holds it; it reads `input` (3 channels).
 */
function spreadPair(g: GraphBuilder, prefix: string, input: string, output: string, seed: number): void {
  const r = rng(seed);
  const C = 4;
  const w1 = randn(r, C * 3, 0.5);
  for (let o = 0; o < C; o++) for (let k = 0; k < 3; k++) w1[o * 3 + k]! *= 10 ** (-1.5 + o);
  g.init(`${prefix}_w1`, [C, 3, 1, 1], w1);
  const c1 = g.node('Conv', [input, `${prefix}_w1`], {}, { name: `${prefix}_conv1` });
  const a = g.node('Relu', [c1], {}, { name: `${prefix}_relu` });
  g.init(`${prefix}_w2`, [4, C, 1, 1], randn(r, 4 * C, 0.5));
  g.node('Conv', [a, `${prefix}_w2`], {}, { name: `${prefix}_conv2`, outputs: [output] });
}

describe('coverage of layers rewritten by --equalize', { timeout: 120_000 }, () => {
  it('an equalized pair in a branch no probe takes: counted, named and probed for like folded layers', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('y', [1, 4, 4, 4]);
    const m = g.node('ReduceMax', ['x'], { keepdims: 0 }, { name: 'peak' });
    const cond = g.node('Greater', [m, g.init('threshold', [], [1e6])], {}, { name: 'bright' });
    const then = new GraphBuilder('then');
    then.output('then_y', [1, 4, 4, 4]);
    spreadPair(then, 'then', 'x', 'then_y', 21);
    const other = new GraphBuilder('else');
    other.output('else_y', [1, 4, 4, 4]);
    other.init('else_w', [4, 3, 1, 1], randn(rng(22), 12, 0.5));
    other.node('Conv', ['x', 'else_w'], {}, { name: 'else_conv', outputs: ['else_y'] });
    g.node('If', [cond], { then_branch: then, else_branch: other }, { name: 'gate_if', outputs: ['y'] });
    const r = foldFile(save('eq-never.onnx', modelBytes(g)), join(dir, 'eq-never.out.onnx'), { equalize: true });
    // precondition: the pair was equalized (and proven on its branch region), nothing was folded
    expect(r.equalized.map((p) => [p.first, p.second, p.status])).toEqual([['then_conv1', 'then_conv2', 'equalized']]);
    expect(r.normalizations).toEqual([]);
    const c = r.check!;
    expect(c.status).toBe('passed');
    expect(c.coverage).toEqual({
      executed: 0, total: 2, missed: ['then_conv1 in main/gate_if.then_branch', 'then_conv2 in main/gate_if.then_branch'], extraProbes: DEFAULT_EXTRA_PROBES,
    });
    expect(c.probes).toBe(2 + DEFAULT_EXTRA_PROBES);
    expect(c.outputs[0]!.observable).toBeUndefined();
    expect(foldText(r)).toMatch(/coverage 0\/2: never executed by any probe \(after 8 extra probes\): then_conv1 in main\/gate_if\.then_branch, then_conv2 in main\/gate_if\.then_branch/);
  });

  it('an equalized pair in the main graph: coverage 2/2, and the output it feeds is observable', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('y', [1, 4, 4, 4]);
    spreadPair(g, 'main', 'x', 'y', 23);
    const r = foldFile(save('eq-main.onnx', modelBytes(g)), join(dir, 'eq-main.out.onnx'), { equalize: true });
    expect(r.equalized.map((p) => p.status)).toEqual(['equalized']);
    const c = r.check!;
    expect(c.status).toBe('passed');
    expect(c.coverage).toEqual({ executed: 2, total: 2, missed: [], extraProbes: 0 });
    expect(c.outputs[0]!.observable).toBe(true);
    expect(foldText(r)).toMatch(/coverage 2\/2/);
  });

  it('a layer both folded and equalized counts once', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('y', [1, 4, 4, 4]);
    g.init('w1', [4, 3, 1, 1], randn(rng(24), 12, 0.5));
    const c1 = g.node('Conv', ['x', 'w1'], {}, { name: 'conv1' });
    const r0 = rng(25);
    g.init('g', [4], [0.03, 0.3, 3, 30]); g.init('be', [4], randn(r0, 4, 0.2)); g.init('mu', [4], randn(r0, 4, 0.1)); g.init('va', [4], uniform(r0, 4, 0.5, 1.5));
    const b = g.node('BatchNormalization', [c1, 'g', 'be', 'mu', 'va'], {}, { name: 'bn1' });
    const a = g.node('Relu', [b], {}, { name: 'relu1' });
    g.init('w2', [4, 4, 1, 1], randn(rng(26), 16, 0.5));
    g.node('Conv', [a, 'w2'], {}, { name: 'conv2', outputs: ['y'] });
    const r = foldFile(save('eq-fold.onnx', modelBytes(g)), join(dir, 'eq-fold.out.onnx'), { equalize: true });
    expect(r.normalizations.map((e) => [e.node, e.status, e.target])).toEqual([['bn1', 'folded', 'conv1']]);
    expect(r.equalized.map((p) => [p.first, p.second, p.status])).toEqual([['conv1', 'conv2', 'equalized']]);
    expect(r.check!.coverage).toEqual({ executed: 2, total: 2, missed: [], extraProbes: 0 });
  });
});

describe('--clone-shared: only the nodes actually rewritten count', { timeout: 120_000 }, () => {
  /** The output `B` and its observability in the JSON report the CLI writes and in the text ledger it prints. */
  function viaCli(model: string, stem: string): { json: { check: { coverage: unknown; outputs: Array<{ name: string; observable?: boolean }> } }; text: string } {
    const json = join(dir, `${stem}.json`);
    const r = pleat(['fold', model, '-o', join(dir, `${stem}.out.onnx`), '--clone-shared', '--report', `json:${json}`]);
    expect(r.code, r.stderr).toBe(0);
    return { json: JSON.parse(readFileSync(json, 'utf8')), text: r.stdout };
  }

  /**
   * One rewritten node ran; B, fed by an untouched layer only, is bit-identical and makes no observability claim
   * (library result, the CLI's JSON report and its text ledger), while A, fed by the rewritten one, is observable.
   */
  function expectOnlyAObservable(c: NonNullable<ReturnType<typeof foldFile>['check']>, cli: ReturnType<typeof viaCli>): void {
    expect(c.coverage).toEqual({ executed: 1, total: 1, missed: [], extraProbes: 0 });
    const B = c.outputs.find((o) => o.name === 'B')!;
    expect(B.maxAbs).toBe(0);
    expect('observable' in B).toBe(false);
    expect(c.outputs.find((o) => o.name === 'A')!.observable).toBe(true);
    expect(cli.json.check.outputs.find((o) => o.name === 'B')).not.toHaveProperty('observable');
    expect(cli.json.check.outputs.find((o) => o.name === 'A')!.observable).toBe(true);
    expect(cli.text).not.toMatch(/not observable/);
  }

  it('two Conv layers share one weight: the one feeding B is untouched, so B makes no observability claim', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('A', [1, 4, 4, 4]).output('B', [1, 4, 4, 4]);
    g.init('w', [4, 3, 1, 1], randn(rng(31), 12, 0.5));
    const ca = g.node('Conv', ['x', 'w'], {}, { name: 'conv_a' });
    g.node('BatchNormalization', [ca, ...bnParams(g, 'bn_a', 4, 32)], {}, { name: 'bn_a', outputs: ['A'] });
    g.node('Conv', ['x', 'w'], {}, { name: 'conv_b', outputs: ['B'] });
    const model = save('shared-weight.onnx', modelBytes(g));
    const r = foldFile(model, join(dir, 'shared-weight.out.onnx'), { cloneShared: true });
    expect(r.normalizations.map((e) => [e.node, e.status])).toEqual([['bn_a', 'folded']]);
    expectOnlyAObservable(r.check!, viaCli(model, 'shared-weight'));
  });

  it('one Conv read by a BN (output A) and directly by output B: the copy is rewritten, the original is not', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 3, 4, 4]).output('A', [1, 4, 4, 4]).output('B', [1, 4, 4, 4]);
    g.init('w', [4, 3, 1, 1], randn(rng(33), 12, 0.5));
    g.node('Conv', ['x', 'w'], {}, { name: 'conv', outputs: ['B'] });
    g.node('BatchNormalization', ['B', ...bnParams(g, 'bn_a', 4, 34)], {}, { name: 'bn_a', outputs: ['A'] });
    const model = save('shared-output.onnx', modelBytes(g));
    const r = foldFile(model, join(dir, 'shared-output.out.onnx'), { cloneShared: true });
    const bn = r.normalizations.find((e) => e.node === 'bn_a')!;
    expect([bn.status, bn.cloneBytes]).toEqual(['folded', 48]); // a copy of the 4x3 float32 weight
    // the copy is the one rewritten node; the original keeps its weights and feeds B alone
    expect(foldText(r)).not.toMatch(/not observable/);
    expectOnlyAObservable(r.check!, viaCli(model, 'shared-output'));
  });
});
