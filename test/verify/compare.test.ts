// compare and evaluate end to end on models built with test/helpers/build.ts (onnx-proto's encoder) and read
// by pleat. Outside references: the BatchNormalization formula of the ONNX operator documentation
// (Y = (X - mean) / sqrt(var + epsilon) * scale + B), used to fold a Conv + BatchNormalization pair by hand;
// onnxruntime-node for evaluate's outputs; numpy for the saved .npy files.
import { describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { existsSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { f, GraphBuilder, modelBytes, randn, rng, T } from '../helpers/build.js';
import { runOrt } from '../helpers/ort.js';
import * as ort from 'onnxruntime-node';
import { parseModel } from '../../src/onnx/read.js';
import { compare } from '../../src/verify/compare.js';
import { resolveInputs } from '../../src/verify/inputs.js';
import { checkProbeEstimate } from '../../src/verify/probe-budget.js';
import { toJsonText } from '../../src/report/json.js';
import { evaluate, safeFileNames } from '../../src/verify/evaluate.js';
import { saveOutputs, saveOutputsStaged } from '../../src/jobs/save-outputs.js';
import { readNpy } from '../../src/verify/npy.js';
import { DEFAULT_GATES } from '../../src/verify/gate.js';
import { DataType } from '../../src/graph/ir.js';
import { PleatError } from '../../src/errors.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-compare-'));
const CI = 3, CO = 4, K = 3;

interface Params { w: Float32Array; b: Float32Array; scale: Float32Array; shift: Float32Array; mean: Float32Array; variance: Float32Array }
function params(): Params {
  const r = rng(7);
  return {
    w: randn(r, CO * CI * K * K, 0.3), b: randn(r, CO, 0.1), scale: randn(r, CO, 0.2, 1), shift: randn(r, CO, 0.5),
    mean: randn(r, CO, 0.3), variance: Float32Array.from(randn(r, CO, 0.2, 1), Math.abs),
  };
}

/** x [batch, 3, 6, 6] -> Conv 3x3 pad 1 -> BatchNormalization -> y, and Relu(y) -> z. */
function convBn(p: Params, outNames = ['y', 'z']) {
  const g = new GraphBuilder();
  g.input('x', ['batch', CI, 6, 6]).output(outNames[0]!, ['batch', CO, 6, 6]).output(outNames[1]!, ['batch', CO, 6, 6]);
  g.init('w', [CO, CI, K, K], p.w); g.init('b', [CO], p.b);
  g.init('scale', [CO], p.scale); g.init('shift', [CO], p.shift); g.init('mean', [CO], p.mean); g.init('var', [CO], p.variance);
  const c = g.node('Conv', ['x', 'w', 'b'], { pads: [1, 1, 1, 1] });
  g.node('BatchNormalization', [c, 'scale', 'shift', 'mean', 'var'], { epsilon: f(1e-5) }, { outputs: [outNames[0]!] });
  g.node('Relu', [outNames[0]!], {}, { outputs: [outNames[1]!] });
  return parseModel(modelBytes(g), dir);
}

/** The same function with the BatchNormalization folded into the Conv by the ONNX formula, weights stored as float32. */
function folded(p: Params, perturb = 0) {
  const w = new Float32Array(p.w.length), b = new Float32Array(CO);
  for (let c = 0; c < CO; c++) {
    const s = p.scale[c]! / Math.sqrt(p.variance[c]! + Math.fround(1e-5));
    for (let k = 0; k < CI * K * K; k++) w[c * CI * K * K + k] = p.w[c * CI * K * K + k]! * s;
    b[c] = (p.b[c]! - p.mean[c]!) * s + p.shift[c]!;
  }
  b[1] = b[1]! + perturb;
  const g = new GraphBuilder();
  g.input('x', ['batch', CI, 6, 6]).output('y', ['batch', CO, 6, 6]).output('z', ['batch', CO, 6, 6]);
  g.init('w', [CO, CI, K, K], w); g.init('b', [CO], b);
  g.node('Conv', ['x', 'w', 'b'], { pads: [1, 1, 1, 1] }, { outputs: ['y'] });
  g.node('Relu', ['y'], {}, { outputs: ['z'] });
  return parseModel(modelBytes(g), dir);
}

describe('compare', () => {
  const p = params();

  it("an estimate of A given by the caller is held to the probe memory limit in force, as one worked out here is", () => {
    const a = convBn(p), b = folded(p);
    // the estimate fold works out before folding (src/jobs/fold.ts), here under the default limit
    const specs = resolveInputs(a.graph, new Map(), new Map(), new Map([['batch', 2]]));
    const estimate = checkProbeEstimate(a.graph, specs);
    const limit = Math.floor(estimate.totalBytes / 2);
    const own = () => compare(a, b, { dims: { batch: 2 }, maxProbeMemory: limit, budget: false });
    const given = () => compare(a, b, { dims: { batch: 2 }, maxProbeMemory: limit, budget: false, estimateOfA: estimate });
    expect(own).toThrow(/a probe of this model would make values/);
    expect(given).toThrow(/a probe of this model would make values/);
    // within the limit, the given estimate changes nothing in the report
    expect(compare(a, b, { dims: { batch: 2 }, budget: false, estimateOfA: estimate })).toEqual(compare(a, b, { dims: { batch: 2 }, budget: false }));
  });

  it('a model against itself passes with zero error', () => {
    const a = convBn(p);
    const r = compare(a, a, { dims: { batch: 2 }, probes: 2 });
    expect(r.passed).toBe(true);
    expect(r.probes).toBe(2);
    expect(r.inputs).toEqual([{ name: 'x', dtype: 'float32', dims: [2, 3, 6, 6], source: 'probe' }]);
    for (const o of r.outputs) {
      expect(o.status).toBe('compared');
      expect(o.metrics!.maxAbs).toBe(0);
      expect(o.metrics!.cosine).toBeCloseTo(1, 12);
      expect(o.gate).toEqual({ expr: DEFAULT_GATES.float32, source: 'default', passed: true, limits: [{ metric: 'maxRel', limit: 1e-3 }] });
      // A and B are the same model, so their float32 runs agree and the rewrite adds nothing
      expect(o.budget!.addedAbs).toBe(0);
      expect(o.budget!.own.maxAbs).toBeGreaterThan(0); // float32 arithmetic does round
    }
  });

  it('the hand-folded model (ONNX BatchNormalization formula) passes the default gate', () => {
    const r = compare(convBn(p), folded(p), { dims: { batch: 2 } });
    expect(r.passed).toBe(true);
    const y = r.outputs[0]!;
    expect(y.metrics!.maxAbs).toBeGreaterThan(0); // folded weights are rounded to float32
    expect(y.metrics!.maxRel).toBeLessThan(1e-4);
    expect(y.budget!.deploy.maxRel).toBeLessThan(1e-3);
  });

  it('a perturbed fold fails the default gate and says which output and gate', () => {
    const r = compare(convBn(p), folded(p, 1e-2), { dims: { batch: 1 } });
    expect(r.passed).toBe(false);
    const y = r.outputs.find((o) => o.name === 'y')!;
    expect(y.passed).toBe(false);
    expect(y.gate!.passed).toBe(false);
    expect(y.metrics!.maxAbs).toBeCloseTo(1e-2, 6);
    expect(y.problem).toBe(`output 'y' fails the gate '${DEFAULT_GATES.float32}'`);
    expect(y.budget!.addedAbs).toBeGreaterThan(9e-3);
  });

  it('a user gate replaces the default, and budget names work in it', () => {
    const a = convBn(p), b = folded(p);
    const loose = compare(a, b, { dims: { batch: 1 }, gate: 'addedAbs <= 1e-4 and maxAbs < 1', probes: 1 });
    expect(loose.passed).toBe(true);
    expect(loose.outputs[0]!.gate!.source).toBe('user');
    const strict = compare(a, b, { dims: { batch: 1 }, gate: 'maxAbs == 0', probes: 1 });
    expect(strict.passed).toBe(false);
    expect(() => compare(a, b, { dims: { batch: 1 }, gate: 'addedAbs < 1', budget: false })).toThrow(/not measured here/);
    expect(() => compare(a, b, { dims: { batch: 1 }, gate: 'maxAbs <' })).toThrow(PleatError);
  });

  it('outputs with different names or shapes are reported failures, not exceptions', () => {
    const r = compare(convBn(p), convBn(p, ['y', 'relu']), { dims: { batch: 1 }, probes: 1 });
    expect(r.passed).toBe(false);
    expect(r.outputs.map((o) => [o.name, o.status, o.passed])).toEqual([['y', 'compared', true], ['z', 'only-in-a', false], ['relu', 'only-in-b', false]]);
    expect(r.outputs[1]!.problem).toBe("model B has no output 'z'");

    const g = new GraphBuilder();
    g.input('x', ['batch', CI, 6, 6]).output('y').output('z');
    g.init('w', [CO, CI, K, K], p.w);
    g.node('Conv', ['x', 'w'], { pads: [1, 1, 1, 1] }, { outputs: ['y'] });
    g.node('Conv', ['x', 'w'], {}, { outputs: ['z'] }); // no padding: 4x4 instead of 6x6
    const r2 = compare(convBn(p), parseModel(modelBytes(g), dir), { dims: { batch: 1 }, probes: 1 });
    const z = r2.outputs.find((o) => o.name === 'z')!;
    expect(z.status).toBe('shape-differs');
    expect(z.problem).toBe("output 'z' has shape [1,4,6,6] in model A but [1,4,4,4] in model B");
    expect(r2.passed).toBe(false);
  });

  it('given inputs make one run; B with other inputs is a clear error', () => {
    const a = convBn(p);
    const x = { type: DataType.FLOAT, dims: [1, 3, 6, 6], data: Float64Array.from(randn(rng(3), 108)) };
    const r = compare(a, a, { inputs: { x }, probes: 5 });
    expect(r.probes).toBe(1);
    expect(r.inputs[0]!.source).toBe('value');
    const g = new GraphBuilder();
    g.input('image', [1, 3, 6, 6]).output('y');
    g.node('Identity', ['image'], {}, { outputs: ['y'] });
    expect(() => compare(a, parseModel(modelBytes(g), dir), { inputs: { x } })).toThrow("model B has no input 'x', which model A takes: both models must take the same inputs");
  });

  it('a model that cannot run is a skipped comparison (no-kernel) naming which model, never passed', () => {
    const g = new GraphBuilder();
    g.input('x', ['batch', CI, 6, 6]).output('y').output('z');
    g.node('NoSuchOp', ['x'], {}, { outputs: ['y'], domain: 'example.unknown' });
    g.node('Relu', ['x'], {}, { outputs: ['z'] });
    const b = parseModel(modelBytes(g, { extraOpsets: [['example.unknown', 1]] }), dir);
    const r = compare(convBn(p), b, { dims: { batch: 1 } });
    expect(r.status).toBe('skipped');
    expect(r.passed).toBe(false);
    expect(r.skipped?.reason).toBe('no-kernel');
    expect(r.skipped?.message).toMatch(/^model B, float64 run: /);
  });

  it('when B stores an output in a lower precision, the looser default gate applies and dtypeB is reported', () => {
    const g = new GraphBuilder();
    g.input('x', ['batch', CI, 6, 6]).output('y', undefined, T.FLOAT16).output('z');
    g.init('w', [CO, CI, K, K], p.w); g.init('b', [CO], p.b);
    g.init('scale', [CO], p.scale); g.init('shift', [CO], p.shift); g.init('mean', [CO], p.mean); g.init('var', [CO], p.variance);
    const c = g.node('Conv', ['x', 'w', 'b'], { pads: [1, 1, 1, 1] });
    const bn = g.node('BatchNormalization', [c, 'scale', 'shift', 'mean', 'var'], { epsilon: f(1e-5) });
    g.node('Cast', [bn], { to: T.FLOAT16 }, { outputs: ['y'] });
    g.node('Relu', [bn], {}, { outputs: ['z'] });
    const r = compare(convBn(p), parseModel(modelBytes(g), dir), { dims: { batch: 1 }, probes: 1 });
    const y = r.outputs[0]!;
    expect([y.dtype, y.dtypeB, y.gate!.expr]).toEqual(['float32', 'float16', DEFAULT_GATES.float16]);
    expect(y.metrics!.maxAbs).toBeGreaterThan(0); // float16 rounding of the output
    expect(y.passed).toBe(true);
  });

  it('the report is deterministic JSON, and non-finite metrics survive as strings', () => {
    const a = convBn(p);
    const one = toJsonText(compare(a, folded(p), { dims: { batch: 1 }, seed: 5 }));
    const two = toJsonText(compare(a, folded(p), { dims: { batch: 1 }, seed: 5 }));
    expect(one).toBe(two);
    const parsed = JSON.parse(one);
    expect(Object.keys(parsed)).toEqual(['status', 'skipped', 'passed', 'halfPrecisionWeights', 'arithmetic', 'seed', 'probes', 'budget', 'assumedDims', 'inputs', 'outputs']);
    expect(parsed.seed).toBe(5);
    expect(toJsonText({ m: Infinity, n: NaN })).toBe('{\n  "m": "Infinity",\n  "n": "NaN"\n}\n');
  });
});

describe('evaluate', () => {
  const p = params();

  it('matches onnxruntime-node in float32 and float64 runs', async () => {
    const m = convBn(p);
    const bytes = modelBytes((() => { // the same graph as convBn, for onnxruntime
      const g = new GraphBuilder();
      g.input('x', ['batch', CI, 6, 6]).output('y').output('z');
      g.init('w', [CO, CI, K, K], p.w); g.init('b', [CO], p.b);
      g.init('scale', [CO], p.scale); g.init('shift', [CO], p.shift); g.init('mean', [CO], p.mean); g.init('var', [CO], p.variance);
      const c = g.node('Conv', ['x', 'w', 'b'], { pads: [1, 1, 1, 1] });
      g.node('BatchNormalization', [c, 'scale', 'shift', 'mean', 'var'], { epsilon: f(1e-5) }, { outputs: ['y'] });
      g.node('Relu', ['y'], {}, { outputs: ['z'] });
      return g;
    })());
    for (const precision of ['float32', 'float64'] as const) {
      const res = evaluate(m, { dims: { batch: 2 }, seed: 11, precision });
      const x = res.inputs.get('x')!;
      const ort = await runOrt(bytes, { x: { dims: x.dims, data: Float32Array.from(x.data) } });
      for (const name of ['y', 'z']) {
        const mine = res.outputs.get(name)!;
        expect(mine.dims).toEqual(ort[name]!.dims);
        let maxAbs = 0, peak = 0;
        mine.data.forEach((v, i) => { maxAbs = Math.max(maxAbs, Math.abs(v - ort[name]!.data[i]!)); peak = Math.max(peak, Math.abs(v)); });
        // onnxruntime computes in float32: agreement to a few float32 roundings of the output's scale
        expect(maxAbs).toBeLessThan(1e-5 * peak);
        expect(peak).toBeGreaterThan(0.1);
      }
    }
  });

  it('integer and bool probes are valid inputs that onnxruntime-node agrees on (Gather, Where, ArgMax)', async () => {
    const g = new GraphBuilder();
    g.input('ids', [5], T.INT64).input('mask', [5, 3], T.BOOL).input('x', [5, 3]).output('picked').output('sel').output('arg', undefined, T.INT64);
    g.init('table', [4, 3], Float32Array.from({ length: 12 }, (_, i) => i * 0.5 - 2));
    g.node('Gather', ['table', 'ids'], { axis: 0 }, { outputs: ['picked'] });
    g.node('Where', ['mask', 'picked', 'x'], {}, { outputs: ['sel'] });
    g.node('ArgMax', ['sel'], { axis: 1, keepdims: 0 }, { outputs: ['arg'] });
    const bytes = modelBytes(g);
    const res = evaluate(parseModel(bytes, dir), { seed: 4 });
    const ids = res.inputs.get('ids')!, mask = res.inputs.get('mask')!, x = res.inputs.get('x')!;
    expect(new Set(ids.data).size).toBeGreaterThan(1);
    // runOrt has no bool feeds, so this test opens its own session (graph optimizations off, one thread)
    const session = await ort.InferenceSession.create(bytes, { graphOptimizationLevel: 'disabled', intraOpNumThreads: 1, interOpNumThreads: 1 });
    const got = await session.run({
      ids: new ort.Tensor('int64', BigInt64Array.from(ids.data, (v) => BigInt(v)), ids.dims),
      mask: new ort.Tensor('bool', Uint8Array.from(mask.data), mask.dims),
      x: new ort.Tensor('float32', Float32Array.from(x.data), x.dims),
    });
    await session.release();
    for (const name of ['picked', 'sel', 'arg']) {
      expect(Array.from(res.outputs.get(name)!.data)).toEqual(Array.from(got[name]!.data as ArrayLike<number | bigint>, Number));
    }
    expect(res.outputs.get('arg')!.type).toBe(DataType.INT64);
    // int64 outputs get the exact gate
    const r = compare(parseModel(bytes, dir), parseModel(bytes, dir));
    expect(r.outputs.find((o) => o.name === 'arg')!.gate!.expr).toBe(DEFAULT_GATES.exact);
    expect(r.passed).toBe(true);
  });

  it('is deterministic for a seed and records where inputs came from', () => {
    const m = convBn(p);
    const a = evaluate(m, { dims: { batch: 1 } }), b = evaluate(m, { dims: { batch: 1 }, seed: 0 });
    expect(Array.from(a.outputs.get('y')!.data)).toEqual(Array.from(b.outputs.get('y')!.data));
    expect(a.inputSummary).toEqual([{ name: 'x', dtype: 'float32', dims: [1, 3, 6, 6], source: 'probe' }]);
    expect(() => evaluate(m)).toThrow("input 'x' dim 'batch' is dynamic: set it with --dim batch=N or --shape x=Nx3x6x6 (each N a size of 1 or more)");
  });
});

describe('saveOutputs', () => {
  it('makes safe, unique file names deterministically', () => {
    expect(safeFileNames(['y', 'a/b:0', 'a_b_0', 'A_B_0', '.hidden', '', 'outputs'])).toEqual(
      ['y.npy', 'a_b_0.npy', 'a_b_0-2.npy', 'A_B_0-3.npy', '_hidden.npy', 'output.npy', 'outputs.npy']);
  });

  it('writes one .npy per output plus outputs.json, and leaves no temporary files', () => {
    const out = join(dir, 'saved');
    const outputs = new Map([
      ['logits/0', { type: DataType.FLOAT, dims: [2], data: new Float64Array([0.1, -3]) }],
      ['ids', { type: DataType.INT64, dims: [1], data: new Float64Array([42]) }],
    ]);
    const saved = saveOutputs(out, outputs);
    expect(saved.files).toEqual([{ name: 'logits/0', file: 'logits_0.npy' }, { name: 'ids', file: 'ids.npy' }]);
    expect(JSON.parse(readFileSync(join(out, 'outputs.json'), 'utf8'))).toEqual({ 'logits/0': 'logits_0.npy', ids: 'ids.npy' });
    expect(readdirSync(out).sort()).toEqual(['ids.npy', 'logits_0.npy', 'outputs.json']);
    expect(Array.from(readNpy(join(out, 'logits_0.npy')).data)).toEqual([Math.fround(0.1), -3]);
    saveOutputs(out, outputs, { float64: true });
    const f64 = readNpy(join(out, 'logits_0.npy'));
    expect(f64.type).toBe(DataType.DOUBLE);
    expect(Array.from(f64.data)).toEqual([0.1, -3]);
  });

  it.skipIf(!existsSync('/usr/bin/python3'))('numpy reads outputs.json and every file it names (Debian python3-numpy; skipped only without /usr/bin/python3)', () => {
    const out = join(dir, 'saved-np');
    saveOutputs(out, new Map([
      ['logits/0', { type: DataType.FLOAT, dims: [2], data: new Float64Array([0.1, -3]) }],
      ['ids', { type: DataType.INT64, dims: [1], data: new Float64Array([42]) }],
    ]), { float64: true });
    {
      const got = execFileSync('/usr/bin/python3', ['-c', `
import json, numpy as np
d = ${JSON.stringify(out)}
idx = json.load(open(d + '/outputs.json'))
print(json.dumps({k: np.load(d + '/' + v).tolist() for k, v in idx.items()}))`], { encoding: 'utf8' });
      expect(JSON.parse(got)).toEqual({ 'logits/0': [0.1, -3], ids: [42] });
    }
  });

  it('into folders not there yet: staged, nothing made until the commit, all of them made by it', () => {
    const top = join(dir, 'nested-top');
    const outputs = new Map([['y', { type: DataType.FLOAT, dims: [1], data: new Float64Array([2]) }]]);
    const staged = saveOutputsStaged(join(top, 'b', 'c'), outputs);
    expect(existsSync(top)).toBe(false);
    staged.abort();
    expect(existsSync(top)).toBe(false);
    expect(readdirSync(dir).filter((n) => n.startsWith('.pleat-'))).toEqual([]);
    saveOutputsStaged(join(top, 'b', 'c'), outputs).commit();
    expect(readdirSync(join(top, 'b', 'c')).sort()).toEqual(['outputs.json', 'y.npy']);
    expect(readdirSync(dir).filter((n) => n.startsWith('.pleat-'))).toEqual([]);
  });

  it('a folder that cannot be created is a one-line bad-input error', () => {
    const file = join(dir, 'plain-file');
    writeFileSync(file, 'x');
    expect(() => saveOutputs(join(file, 'sub'), new Map())).toThrow(/plain-file\/sub: cannot create the output folder \(ENOTDIR\)/);
  });
});

// Outputs that are NaN (or one infinity) at every element on both sides agree element by element but compare
// nothing: such a check is skipped, never passed (a weight scaled by -7 upstream of Sqrt(-(|u| + c)) went
// unnoticed, reported as maxAbs 0, cosine 1). A NaN on one side only, or unequal infinities, still fails.
describe('outputs with no finite element', () => {
  /** y = tail(x * w + c) for x [1, 4]: the tail decides whether y is NaN, infinite or finite. */
  function tailModel(w: number, tail: 'nan' | 'inf' | 'finite'): ReturnType<typeof parseModel> {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 4]);
    g.init('w', [4], new Float32Array([w, w, w, w]));
    g.init('c', [4], new Float32Array([1, 1, 1, 1]));
    g.init('big', [1], new Float32Array([1000]));
    const u = g.node('Mul', ['x', 'w']);
    const a = g.node('Abs', [u]);
    const v = g.node('Add', [a, 'c']);
    if (tail === 'nan') {
      g.node('Sqrt', [g.node('Neg', [v])], {}, { outputs: ['y'] }); // sqrt of a number below zero is NaN (ONNX Sqrt)
    } else if (tail === 'inf') {
      g.node('Exp', [g.node('Add', [v, 'big'])], {}, { outputs: ['y'] }); // e^(>1000) overflows float32 and float64
    } else {
      g.node('Identity', [v], {}, { outputs: ['y'] });
    }
    return parseModel(modelBytes(g), dir);
  }

  for (const tail of ['nan', 'inf'] as const) {
    it(`all ${tail === 'nan' ? 'NaN' : 'infinite'} on both sides: skipped (no-elements), even with a changed weight`, () => {
      const r = compare(tailModel(1, tail), tailModel(-7, tail), { probes: 3 });
      expect(r.status).toBe('skipped');
      expect(r.skipped?.reason).toBe('no-elements');
      expect(r.skipped?.message).toMatch(/'y' had no element that is a finite number in both models/);
      expect(r.outputs[0]!.status).toBe('empty');
      expect(r.outputs[0]!.passed).toBe(false);
    });
  }

  it('finite somewhere: compared as before (passed when equal, failed on a changed weight)', () => {
    expect(compare(tailModel(1, 'finite'), tailModel(1, 'finite'), { probes: 2 }).status).toBe('passed');
    expect(compare(tailModel(1, 'finite'), tailModel(-7, 'finite'), { probes: 2 }).status).toBe('failed');
  });

  it('NaN on one side only fails', () => {
    const r = compare(tailModel(1, 'finite'), tailModel(1, 'nan'), { probes: 2 });
    expect(r.status).toBe('failed');
  });
});

// An output that is zero everywhere on some probes (a Relu of a sum, here) and moved by 1e-9 in model B: judged
// at the output's scale it passes the float32 gate; maxRel was infinite and the cosine 0 on those probes.
describe('a probe whose reference output is all zeros', () => {
  function reluOfSum(shift: number): ReturnType<typeof parseModel> {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 4]);
    g.init('ones', [1, 4], new Float32Array([1, 1, 1, 1]));
    g.init('shift', [1], new Float32Array([shift]));
    const s = g.node('ReduceSum', ['x'], { keepdims: 1 }); // [1, 1]: zero after the Relu when the sum is negative
    const y = g.node('Relu', [g.node('Mul', [s, 'ones'])]);
    g.node('Add', [y, 'shift'], {}, { outputs: ['y'] });
    return parseModel(modelBytes(g), dir);
  }

  it('passes the default gate when the difference is far below the output scale on every probe', () => {
    const references: number[][] = [];
    const r = compare(reluOfSum(0), reluOfSum(1e-9), { probes: 8, onProbe: (p) => { references.push(Array.from(p.float64.get('y')!.data)); } });
    // the probes did include all-zero references and others (else this test would prove nothing)
    expect(references).toHaveLength(8);
    expect(references.some((y) => y.every((v) => v === 0))).toBe(true);
    expect(references.some((y) => y.some((v) => v > 0))).toBe(true);
    expect(r.outputs[0]!.metrics!.maxRel).toBeLessThan(1e-5);
    expect(r.outputs[0]!.metrics!.cosine).toBeGreaterThan(0.99999);
    expect(r.status).toBe('passed');
  });

  it('still fails a difference at the output scale on the all-zero probes', () => {
    expect(compare(reluOfSum(0), reluOfSum(0.5), { probes: 8 }).status).toBe('failed');
  });
});

describe('which model a run failure is blamed on', () => {
  /**
   * x [N, 2, H, W] [-> BatchNormalization] -> Conv (kernel k, no padding) -> y. Without the norm the Conv comes
   * first, so in a pair run node by node it meets the probe before the other model's Conv does.
   */
  function convModel(k: number, bn: boolean, seed: number) {
    const r = rng(seed);
    const g = new GraphBuilder();
    g.input('x', ['N', 2, 'H', 'W']).output('y');
    if (bn) {
      g.init('s', [2], [1, 2]); g.init('t', [2], [0, 1]); g.init('m', [2], [0.1, 0]); g.init('v', [2], [1, 0.5]);
      g.node('BatchNormalization', ['x', 's', 't', 'm', 'v'], {}, { name: 'bn', outputs: ['n'] });
    }
    g.init('w', [3, 2, k, k], randn(r, 6 * k * k));
    g.node('Conv', [bn ? 'n' : 'x', 'w'], {}, { name: 'conv', outputs: ['y'] });
    return parseModel(modelBytes(g), dir);
  }
  const sides = { sideNames: ['the original model', 'the folded model'] as const };
  function failure(f: () => unknown): string {
    try { f(); } catch (e) { expect(e).toBeInstanceOf(PleatError); return (e as Error).message; }
    throw new Error('expected a failure');
  }

  it('both models fail at the probe shape (symbolic dims took size 1): the original is named, with --dim', () => {
    for (let seed = 1; seed <= 6; seed++) {
      const k = 2 + (seed % 3);
      // B is A without its BatchNormalization: it meets the same Conv, which a 1x1 probe cannot feed, first
      const msg = failure(() => compare(convModel(k, true, seed), convModel(k, false, seed), sides));
      expect(msg, `seed ${seed}`).toMatch(/^the original model, float64 run: node 'conv' \(Conv\): input spatial size 1 is too small for kernel/);
      expect(msg).toContain('the symbolic dims N, H, W (no --dim given)');
      expect(msg).toContain('--dim H=<size>');
      // with sizes the Conv can run at, the pair compares
      expect(compare(convModel(k, true, seed), convModel(k, true, seed), { ...sides, dims: { N: 1, H: k + 1, W: k } }).status).toBe('passed');
    }
  });

  it('only the candidate fails: it is the one named, without the --dim hint', () => {
    const msg = failure(() => compare(convModel(1, false, 3), convModel(3, false, 3), sides));
    expect(msg).toMatch(/^the folded model, float64 run: node 'conv' \(Conv\): input spatial size 1 is too small for kernel 3/);
    expect(msg).not.toContain('--dim');
  });
});
