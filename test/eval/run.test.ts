// The evaluator core: node order, errors naming node and value, buffer reuse that never corrupts a live
// value, subgraph scoping, the decoded-initializer cache, and the two GEMM paths against the definition of
// the matrix product. Model-level numbers are checked against onnxruntime-node.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, T, modelBytes, randn, rng } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel, tensorToValue } from '../../src/eval/run.js';
import { gemm, rowMajor, setSimd } from '../../src/eval/gemm.js';
import { setTensorValues } from '../../src/graph/edit.js';
import { isPleatError } from '../../src/errors.js';
import type { Value } from '../../src/eval/value.js';

const feed = (name: string, dims: number[], data: ArrayLike<number>): [string, Value] => [name, { type: T.FLOAT, dims, data: Float64Array.from(data) }];

function thrown(f: () => unknown): Error & { kind?: string } {
  try { f(); } catch (e) { return e as Error & { kind?: string }; }
  throw new Error('expected an error');
}

describe('runModel', () => {
  it('a conv stack with shared intermediates matches onnxruntime-node, and repeated runs give identical results', async () => {
    // x -> Conv -> a ; a -> MaxPool -> b ; a -> AveragePool -> c ; Conv(b) -> d ; d is an output, so is a copy of c via Identity
    const r = rng(11);
    const g = new GraphBuilder();
    g.input('x', [1, 3, 16, 16]).output('d').output('e').output('a');
    g.init('w1', [8, 3, 3, 3], randn(r, 216)); g.init('w2', [4, 8, 3, 3], randn(r, 288));
    g.node('Conv', ['x', 'w1'], { pads: [1, 1, 1, 1] }, { outputs: ['a'] });
    g.node('MaxPool', ['a'], { kernel_shape: [2, 2], strides: [2, 2] }, { outputs: ['b'] });
    g.node('AveragePool', ['a'], { kernel_shape: [2, 2], strides: [2, 2] }, { outputs: ['c'] });
    g.node('Conv', ['b', 'w2'], { pads: [1, 1, 1, 1] }, { outputs: ['d'] });
    g.node('Identity', ['c'], {}, { outputs: ['e'] });
    const bytes = modelBytes(g, { opset: 13 });
    const x = randn(r, 768);
    const ref = await runOrt(bytes, { x: { dims: [1, 3, 16, 16], data: x } });
    const model = parseModel(bytes, '.');
    const first = runModel(model, new Map([feed('x', [1, 3, 16, 16], x)]), { precision: 'float64' });
    expect([...first.keys()]).toEqual(['d', 'e', 'a']);
    const snapshot = [...first.values()].map((v) => Array.from(v.data));
    for (let i = 0; i < 3; i++) {
      for (const p of ['float32', 'float64'] as const) {
        const out = runModel(model, new Map([feed('x', [1, 3, 16, 16], x)]), { precision: p });
        for (const name of ['d', 'e', 'a']) {
          const { maxAbs, scale } = maxDiff(out.get(name)!.data, ref[name]!.data);
          expect(maxAbs, `${name} ${p}`).toBeLessThanOrEqual(4e-5 * scale);
        }
      }
    }
    // results handed out earlier were not overwritten by later runs reusing buffers
    expect([...first.values()].map((v) => Array.from(v.data))).toEqual(snapshot);
  });

  it('reading an undefined value is a one-line bad-model error naming node and value', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 1, 2, 2]).output('y');
    g.node('MaxPool', ['nowhere'], { kernel_shape: [1, 1] }, { name: 'pool_a', outputs: ['y'] });
    const e = thrown(() => runModel(parseModel(modelBytes(g), '.'), new Map([feed('x', [1, 1, 2, 2], [1, 2, 3, 4])]), { precision: 'float64' }));
    expect(isPleatError(e) && e.kind).toBe('bad-model');
    expect(e.message).toContain("'pool_a'");
    expect(e.message).toContain("'nowhere'");
    expect(e.message).not.toContain('\n');
  });

  it('an unknown operator and an unknown attribute value are unsupported-op errors naming op, node and opset', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 1, 2, 2]).output('y');
    g.node('FancyOp', ['x'], {}, { name: 'odd', outputs: ['y'] });
    const e = thrown(() => runModel(parseModel(modelBytes(g, { opset: 13 }), '.'), new Map([feed('x', [1, 1, 2, 2], [1, 2, 3, 4])]), { precision: 'float64' }));
    expect(e.kind).toBe('unsupported-op');
    expect(e.message).toMatch(/odd.*FancyOp.*13/);
    const g2 = new GraphBuilder();
    g2.input('x', [1, 1, 2, 2]).output('y');
    g2.node('MaxPool', ['x'], { kernel_shape: [1, 1], auto_pad: 'SIDEWAYS' }, { name: 'p1', outputs: ['y'] });
    const e2 = thrown(() => runModel(parseModel(modelBytes(g2, { opset: 12 }), '.'), new Map([feed('x', [1, 1, 2, 2], [1, 2, 3, 4])]), { precision: 'float64' }));
    expect(e2.kind).toBe('unsupported-op');
    expect(e2.message).toMatch(/p1.*MaxPool.*12.*SIDEWAYS/);
  });

  it('a missing model input is a bad-input error; an initializer-backed input defaults to its initializer', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 1, 2, 2]).input('w', [1, 1, 1, 1]).output('y');
    g.init('w', [1, 1, 1, 1], [3]);
    g.node('Conv', ['x', 'w'], {}, { outputs: ['y'] });
    const model = parseModel(modelBytes(g), '.');
    expect(thrown(() => runModel(model, new Map(), { precision: 'float64' })).kind).toBe('bad-input');
    const y = runModel(model, new Map([feed('x', [1, 1, 2, 2], [1, 2, 3, 4])]), { precision: 'float64' }).get('y')!;
    expect(Array.from(y.data)).toEqual([3, 6, 9, 12]);
    const y2 = runModel(model, new Map([feed('x', [1, 1, 2, 2], [1, 2, 3, 4]), feed('w', [1, 1, 1, 1], [-1])]), { precision: 'float64' }).get('y')!;
    expect(Array.from(y2.data)).toEqual([-1, -2, -3, -4]);
  });

  it('an edited initializer is decoded afresh, and an initializer returned as an output is a copy', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 1, 1, 2]).output('y').output('w');
    g.init('w', [1, 1, 1, 1], [2]);
    g.node('Conv', ['x', 'w'], {}, { outputs: ['y'] });
    const model = parseModel(modelBytes(g), '.');
    const run = () => runModel(model, new Map([feed('x', [1, 1, 1, 2], [1, 2])]), { precision: 'float32' });
    expect(Array.from(run().get('y')!.data)).toEqual([2, 4]);
    const w = run().get('w')!;
    w.data[0] = 100; // the caller's copy, not the cache
    expect(Array.from(run().get('y')!.data)).toEqual([2, 4]);
    setTensorValues(model.graph.initializers[0]!, [5]);
    expect(Array.from(run().get('y')!.data)).toEqual([5, 10]);
    expect(tensorToValue(model.graph.initializers[0]!, 'float32').data).toBeInstanceOf(Float32Array);
  });
});

describe('subgraphs', () => {
  it('an If branch reads an outer value through Identity without its buffer being recycled (checked against onnxruntime-node)', async () => {
    const r = rng(8);
    const branch = new GraphBuilder('then');
    branch.output('bo');
    branch.node('Identity', ['a'], {}, { outputs: ['t'] });
    branch.node('AveragePool', ['t'], { kernel_shape: [1, 1] }, { outputs: ['bo'] });
    const other = new GraphBuilder('else');
    other.output('eo');
    other.node('MaxPool', ['a'], { kernel_shape: [2, 2] }, { outputs: ['eo'] });
    const g = new GraphBuilder();
    g.input('x', [1, 2, 40, 40]).output('y').output('y2');
    g.init('w', [4, 2, 1, 1], randn(r, 8));
    g.init('c', [], [1], T.BOOL);
    g.node('Conv', ['x', 'w'], {}, { outputs: ['a'] });
    g.node('If', ['c'], { then_branch: branch, else_branch: other }, { outputs: ['y'] });
    g.node('MaxPool', ['a'], { kernel_shape: [1, 1] }, { outputs: ['y2'] });
    const bytes = modelBytes(g, { opset: 13 });
    const x = randn(r, 3200);
    const ref = await runOrt(bytes, { x: { dims: [1, 2, 40, 40], data: x } });
    const out = runModel(parseModel(bytes, '.'), new Map([feed('x', [1, 2, 40, 40], x)]), { precision: 'float32' });
    for (const n of ['y', 'y2']) {
      const { maxAbs, scale } = maxDiff(out.get(n)!.data, ref[n]!.data);
      expect(maxAbs, n).toBeLessThanOrEqual(1e-5 * scale);
    }
  });
});

describe('gemm (both the WebAssembly SIMD path and the scalar path) against the definition C[i][j] = sum_k A[i][k] B[k][j]', () => {
  it('random shapes, transposed operands, accumulation, both element types', () => {
    const r = rng(42);
    for (const simd of [true, false]) {
      setSimd(simd);
      try {
        for (let t = 0; t < 25; t++) {
          const M = 1 + Math.floor(r() * 70), N = 1 + Math.floor(r() * 300), K = 1 + Math.floor(r() * 150);
          const tA = r() < 0.5, tB = r() < 0.5, acc = r() < 0.3, f32 = r() < 0.5;
          const A = Float64Array.from(randn(r, M * K)), B = Float64Array.from(randn(r, K * N));
          const C0 = Float64Array.from(randn(r, M * N));
          const want = new Float64Array(M * N);
          for (let i = 0; i < M; i++) for (let j = 0; j < N; j++) {
            let s = acc ? C0[i * N + j]! : 0;
            for (let k = 0; k < K; k++) s += (tA ? A[k * M + i]! : A[i * K + k]!) * (tB ? B[j * K + k]! : B[k * N + j]!);
            want[i * N + j] = s;
          }
          const C = f32 ? Float32Array.from(C0) : Float64Array.from(C0);
          const a = f32 ? Float32Array.from(A) : A, b = f32 ? Float32Array.from(B) : B;
          gemm(M, N, K, rowMajor(a, 0, tA ? M : K, tA), rowMajor(b, 0, tB ? K : N, tB), C, 0, N, acc);
          const { maxAbs } = maxDiff(C, want);
          expect(maxAbs, `simd ${simd} f32 ${f32} M${M} N${N} K${K}`).toBeLessThanOrEqual((f32 ? 1e-5 : 1e-12) * Math.sqrt(K) * 10);
        }
      } finally { setSimd(true); }
    }
  });
});
