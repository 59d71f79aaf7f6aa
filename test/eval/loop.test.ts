// Loop against onnxruntime-node (graph optimizations off) on seeded random models whose trip count depends on the
// data: the body reads outer-scope values, carries a tensor, stops when its sum crosses a threshold, and stacks
// a scan output (the seeds cover early exits, the trip count running out, and zero iterations). The fixed case test_loop11 of the ONNX backend data (onnx 1.12.0) runs in conformance.test.ts.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng, T, f } from '../helpers/build.js';
import { runOrt } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import { MAX_LOOP_ITERATIONS } from '../../src/eval/kernels/loop.js';
import { PleatError } from '../../src/errors.js';
import type { Value } from '../../src/eval/value.js';

function body(): GraphBuilder {
  const b = new GraphBuilder('body');
  b.input('i', [], T.INT64);
  b.input('c_in', [], T.BOOL);
  b.input('x', undefined, T.FLOAT);
  b.node('Cast', ['i'], { to: T.FLOAT }, { outputs: ['fi'] });
  b.node('Mul', ['x', 'a'], {}, { outputs: ['xa'] }); // a: outer-scope graph input
  b.node('Mul', ['fi', 'step'], {}, { outputs: ['fs'] }); // step: outer-scope initializer
  b.node('Add', ['xa', 'fs'], {}, { outputs: ['u'] });
  b.node('Tanh', ['u'], {}, { outputs: ['y'] });
  b.node('ReduceSum', ['y'], { keepdims: 0 }, { outputs: ['s'] });
  b.node('Less', ['s', 'thr'], {}, { outputs: ['c_out'] }); // thr: outer-scope graph input
  b.node('Mul', ['y', 'y'], {}, { outputs: ['sq'] });
  b.output('c_out', [], T.BOOL);
  b.output('y', undefined, T.FLOAT);
  b.output('sq', undefined, T.FLOAT);
  return b;
}

function model(withM: boolean, withCond: boolean): Uint8Array {
  const g = new GraphBuilder();
  g.input('x0', undefined, T.FLOAT);
  g.input('a', undefined, T.FLOAT);
  g.input('thr', [], T.FLOAT);
  if (withM) g.input('M', [], T.INT64);
  if (withCond) { g.input('cond_i', [], T.INT64); g.node('Cast', ['cond_i'], { to: T.BOOL }, { outputs: ['cond'] }); }
  g.init('step', [], [0.25]);
  g.output('y_final');
  g.output('sq_all');
  g.node('Loop', [withM ? 'M' : '', withCond ? 'cond' : '', 'x0'], { body: body() }, { outputs: ['y_final', 'sq_all'] });
  return modelBytes(g, { opset: 13 });
}

describe('Loop vs onnxruntime-node', () => {
  it('data-dependent trip counts with outer-scope values, carried state and a scan output (seeded)', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed);
      const dims = Array.from({ length: 1 + Math.floor(r() * 3) }, () => 1 + Math.floor(r() * 3));
      const n = dims.reduce((p, q) => p * q, 1);
      const x0 = randn(r, n, 0.5), a = randn(r, n, 0.8);
      const thr = (r() - 0.2) * n; // the loop stops once the sum of y reaches it
      const withM = seed % 3 !== 0, withCond = seed % 2 === 0;
      const M = 1 + Math.floor(r() * 8), cond = seed % 4 !== 0 ? 1 : 0;
      const bytes = model(withM, withCond);
      const feeds: Record<string, { dims: number[]; data: Float32Array | BigInt64Array }> = {
        x0: { dims, data: x0 }, a: { dims, data: a }, thr: { dims: [], data: Float32Array.of(thr) },
      };
      const ours = new Map<string, Value>([
        ['x0', { type: T.FLOAT, dims, data: Float64Array.from(x0) }],
        ['a', { type: T.FLOAT, dims, data: Float64Array.from(a) }],
        ['thr', { type: T.FLOAT, dims: [], data: Float64Array.of(thr) }],
      ]);
      if (withM) { feeds.M = { dims: [], data: BigInt64Array.of(BigInt(M)) }; ours.set('M', { type: T.INT64, dims: [], data: Float64Array.of(M) }); }
      // the condition enters as int64 and is cast to bool in the graph (onnxruntime-node feeds have no bool here)
      if (withCond) { feeds.cond_i = { dims: [], data: BigInt64Array.of(BigInt(cond)) }; ours.set('cond_i', { type: T.INT64, dims: [], data: Float64Array.of(cond) }); }
      if (!withM && !withCond) continue;
      const ref = await runOrt(bytes, feeds);
      const m = parseModel(bytes, '.');
      for (const precision of ['float64', 'float32'] as const) {
        const out = runModel(m, ours, { precision });
        for (const name of ['y_final', 'sq_all']) {
          const got = out.get(name)!, want = ref[name]!;
          const what = `seed ${seed} ${precision} ${name} (M ${withM ? M : '-'}, cond ${withCond ? cond : '-'})`;
          expect(got.dims, what).toEqual(want.dims); // zero iterations included: onnxruntime gives [0]
          for (let k = 0; k < want.data.length; k++) expect(Math.abs(got.data[k]! - want.data[k]!), `${what} element ${k}`).toBeLessThanOrEqual(1e-5);
        }
      }
    }
  });

  it('nested loops: the inner body reads the outer body\'s values and the graph\'s (seeded)', async () => {
    for (let seed = 31; seed <= 34; seed++) {
      const r = rng(seed);
      const n = 1 + Math.floor(r() * 4);
      // inner body: acc' = acc * 0.5 + x_outer (outer body's carried value) + fo (outer iteration as float)
      const inner = new GraphBuilder('inner');
      inner.input('j', [], T.INT64);
      inner.input('cj', [], T.BOOL);
      inner.input('acc', undefined, T.FLOAT);
      inner.node('Mul', ['acc', 'half'], {}, { outputs: ['ah'] });
      inner.node('Add', ['ah', 'xo'], {}, { outputs: ['ax'] });
      inner.node('Add', ['ax', 'fo'], {}, { outputs: ['acc2'] });
      inner.node('Identity', ['cj'], {}, { outputs: ['cj2'] });
      inner.output('cj2', [], T.BOOL);
      inner.output('acc2', undefined, T.FLOAT);
      inner.output('ax', undefined, T.FLOAT);
      // outer body: xo' = tanh(inner loop's result), scan output: the inner loop's scan output
      const outer = new GraphBuilder('outer');
      outer.input('i', [], T.INT64);
      outer.input('ci', [], T.BOOL);
      outer.input('xo', undefined, T.FLOAT);
      outer.node('Cast', ['i'], { to: T.FLOAT }, { outputs: ['fo'] });
      outer.node('Loop', ['K', '', 'start'], { body: inner }, { outputs: ['accK', 'axs'] });
      outer.node('Tanh', ['accK'], {}, { outputs: ['xo2'] });
      outer.node('Identity', ['ci'], {}, { outputs: ['ci2'] });
      outer.output('ci2', [], T.BOOL);
      outer.output('xo2', undefined, T.FLOAT);
      outer.output('axs', undefined, T.FLOAT);
      const g = new GraphBuilder();
      g.input('x', [n]);
      g.input('start', [n]);
      g.output('xf');
      g.output('all');
      g.init('half', [], [0.5]);
      g.init('K', [], [1 + Math.floor(r() * 3)], T.INT64);
      g.init('M', [], [1 + Math.floor(r() * 3)], T.INT64);
      g.node('Loop', ['M', '', 'x'], { body: outer }, { outputs: ['xf', 'all'] });
      const bytes = modelBytes(g, { opset: 13 });
      const x = randn(r, n), start = randn(r, n);
      const ref = await runOrt(bytes, { x: { dims: [n], data: x }, start: { dims: [n], data: start } });
      const m = parseModel(bytes, '.');
      for (const precision of ['float64', 'float32'] as const) {
        const out = runModel(m, new Map<string, Value>([
          ['x', { type: T.FLOAT, dims: [n], data: Float64Array.from(x) }],
          ['start', { type: T.FLOAT, dims: [n], data: Float64Array.from(start) }],
        ]), { precision });
        for (const name of ['xf', 'all']) {
          expect(out.get(name)!.dims, `seed ${seed} ${name}`).toEqual(ref[name]!.dims);
          const d = ref[name]!.data;
          for (let k = 0; k < d.length; k++) expect(Math.abs(out.get(name)!.data[k]! - d[k]!), `seed ${seed} ${precision} ${name} ${k}`).toBeLessThanOrEqual(1e-5 * Math.max(1, Math.abs(d[k]!)));
        }
      }
    }
  });

  it(`stops a loop with no trip count and a condition that never turns false after ${MAX_LOOP_ITERATIONS} iterations`, () => {
    const b = new GraphBuilder('body');
    b.input('i', [], T.INT64);
    b.input('c_in', [], T.BOOL);
    b.node('Identity', ['c_in'], {}, { outputs: ['c_out'] });
    b.output('c_out', [], T.BOOL);
    const g = new GraphBuilder();
    g.input('cond', [], T.BOOL);
    g.output('unused_never');
    g.node('Loop', ['', 'cond'], { body: b }, { name: 'forever', outputs: [] });
    g.node('Constant', [], { value_float: f(1) }, { outputs: ['unused_never'] });
    const m = parseModel(modelBytes(g, { opset: 13 }), '.');
    let err: unknown;
    try { runModel(m, new Map([['cond', { type: T.BOOL, dims: [], data: Float64Array.of(1) }]]), { precision: 'float64' }); } catch (e) { err = e; }
    expect(err).toBeInstanceOf(PleatError);
    expect((err as PleatError).kind).toBe('unsupported-op');
    expect((err as PleatError).message).toMatch(/forever.*past 100000 iterations/);
  });
});
