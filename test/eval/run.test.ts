// The evaluator core: node order, errors naming node and value, buffer reuse that never corrupts a live
// value, subgraph scoping, the decoded-initializer cache, and the two GEMM paths against the definition of
// the matrix product. Model-level numbers are checked against onnxruntime-node.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, T, modelBytes, randn, rng } from '../helpers/build.js';
import { runOrt, maxDiff } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel, tensorToValue } from '../../src/eval/run.js';
import { gemm, rowMajor, setSimd, type Operand } from '../../src/eval/gemm.js';
import { markConstant } from '../../src/eval/pool.js';
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

describe('results written over an input array that nothing else reads', () => {
  it('BatchNormalization and Relu reuse only arrays no later node, graph output or caller can read (checked against onnxruntime-node)', async () => {
    // a = Conv(x) feeds BN and a later Add, so BN must not write over it; b (BN) is read by Relu only, so Relu
    // may; d is a graph output and also Relu's input; f = Relu(x) reads the caller's array, which must not change
    const r = rng(21);
    const g = new GraphBuilder();
    g.input('x', [1, 4, 32, 32]).output('c').output('d').output('e').output('f');
    g.init('w', [8, 4, 1, 1], randn(r, 32));
    g.init('s', [8], randn(r, 8)); g.init('bb', [8], randn(r, 8)); g.init('m', [8], randn(r, 8));
    g.init('v', [8], Array.from({ length: 8 }, () => 0.5 + r()));
    g.init('w2', [4, 8, 1, 1], randn(r, 32));
    g.node('Conv', ['x', 'w'], {}, { outputs: ['a'] });
    g.node('BatchNormalization', ['a', 's', 'bb', 'm', 'v'], {}, { outputs: ['b'] });
    g.node('Relu', ['b'], {}, { outputs: ['c'] });
    g.node('Add', ['a', 'c'], {}, { outputs: ['d'] });
    g.node('Relu', ['d'], {}, { outputs: ['e'] });
    g.node('Relu', ['x'], {}, { outputs: ['f'] });
    const bytes = modelBytes(g, { opset: 13 });
    const x = randn(r, 4096);
    const ref = await runOrt(bytes, { x: { dims: [1, 4, 32, 32], data: x } });
    const model = parseModel(bytes, '.');
    for (const p of ['float64', 'float32'] as const) {
      for (let i = 0; i < 3; i++) {
        const given = p === 'float32' ? Float32Array.from(x) : Float64Array.from(x);
        const before = Array.from(given);
        const out = runModel(model, new Map([['x', { type: T.FLOAT, dims: [1, 4, 32, 32], data: given }]]), { precision: p });
        expect(Array.from(given), `caller's input (${p})`).toEqual(before);
        for (const name of ['c', 'd', 'e', 'f']) {
          const { maxAbs, scale } = maxDiff(out.get(name)!.data, ref[name]!.data);
          expect(maxAbs, `${name} ${p} run ${i}`).toBeLessThanOrEqual(4e-6 * Math.max(scale, 1));
        }
        expect(out.get('d')!.data).not.toBe(out.get('e')!.data);
      }
    }
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
  it('several column panels (N > 512), a single row (the dense-layer case) and packed weights reused across calls', () => {
    const r = rng(43);
    const definition = (M: number, N: number, K: number, A: Operand, B: Operand, C0: Float64Array | undefined): Float64Array => {
      const want = new Float64Array(M * N);
      for (let i = 0; i < M; i++) for (let j = 0; j < N; j++) {
        let s = C0 ? C0[i * N + j]! : 0;
        for (let k = 0; k < K; k++) s += A.data[A.off + i * A.rs + k * A.cs]! * B.data[B.off + k * B.rs + j * B.cs]!;
        want[i * N + j] = s;
      }
      return want;
    };
    const shapes: Array<[number, number, number]> = [[9, 1100, 33], [5, 512, 20], [1, 700, 90], [1, 3, 300], [6, 1, 200]];
    for (const [M, N, K] of shapes) {
      for (const f32 of [false, true]) {
        for (const tB of [false, true]) {
          for (const acc of [false, true]) {
            const mk = (n: number) => (f32 ? Float32Array.from(randn(r, n)) : Float64Array.from(randn(r, n)));
            const A = rowMajor(mk(M * K), 0, K), B = rowMajor(mk(K * N), 0, tB ? K : N, tB);
            const C0 = Float64Array.from(randn(r, M * N));
            const C = f32 ? Float32Array.from(C0) : Float64Array.from(C0);
            gemm(M, N, K, A, B, C, 0, N, acc);
            const { maxAbs } = maxDiff(C, definition(M, N, K, A, B, acc ? C0 : undefined));
            expect(maxAbs, `f32 ${f32} tB ${tB} acc ${acc} M${M} N${N} K${K}`).toBeLessThanOrEqual((f32 ? 1e-5 : 1e-12) * Math.sqrt(K) * 10);
          }
        }
      }
    }
    // a constant weight packed once is reused for other inputs; a same-sized array that changes is packed afresh
    for (const f32 of [false, true]) {
      const mk = (n: number) => (f32 ? Float32Array.from(randn(r, n)) : Float64Array.from(randn(r, n)));
      const M = 13, N = 600, K = 40;
      const W = mk(M * K);
      markConstant(W);
      const other = mk(M * K);
      for (let t = 0; t < 3; t++) {
        for (const [w, label] of [[W, 'constant'], [other, 'changing']] as const) {
          const A = rowMajor(w, 0, K), B = rowMajor(mk(K * N), 0, N);
          const C = f32 ? new Float32Array(M * N) : new Float64Array(M * N);
          gemm(M, N, K, A, B, C, 0, N, false);
          const { maxAbs } = maxDiff(C, definition(M, N, K, A, B, undefined));
          expect(maxAbs, `${label} f32 ${f32} call ${t}`).toBeLessThanOrEqual((f32 ? 1e-5 : 1e-12) * Math.sqrt(K) * 10);
        }
        other.set(mk(M * K));
      }
      // the same constant array read as a smaller matrix at an offset is a different packing
      const A = rowMajor(W, K, K), B = rowMajor(mk(K * N), 0, N);
      const C = f32 ? new Float32Array(6 * N) : new Float64Array(6 * N);
      gemm(6, N, K, A, B, C, 0, N, false);
      expect(maxDiff(C, definition(6, N, K, A, B, undefined)).maxAbs).toBeLessThanOrEqual((f32 ? 1e-5 : 1e-12) * Math.sqrt(K) * 10);
    }
  });
});
