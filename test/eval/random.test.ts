// Operators that are random by definition (ONNX operator docs: Bernoulli, Multinomial, RandomNormal,
// RandomNormalLike, RandomUniform, RandomUniformLike draw their outputs from a distribution) are refused with
// their own reason: two runs differ, so the whole-model check cannot compare them.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, T, modelBytes, f } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import { PleatError } from '../../src/errors.js';
import { findKernel, isRandomOp } from '../../src/eval/registry.js';
import type { Value } from '../../src/eval/value.js';

const x: Value = { type: T.FLOAT, dims: [2, 3], data: Float64Array.from([0.1, 0.5, 0.9, 0.2, 0.3, 0.4]) };

function refusal(op: string, inputs: string[], attrs: Record<string, unknown>): PleatError {
  const g = new GraphBuilder();
  g.input('x', [2, 3]);
  g.output('y', undefined, op === 'Multinomial' ? T.INT32 : T.FLOAT);
  g.node(op, inputs, attrs as never, { name: `draw_${op}`, outputs: ['y'] });
  g.node('Identity', ['x'], {}, { outputs: ['unused'] });
  const m = parseModel(modelBytes(g, { opset: 17 }), '.');
  try { runModel(m, new Map([['x', x]]), { precision: 'float64' }); } catch (e) { return e as PleatError; }
  throw new Error(`${op} ran`);
}

describe('random operators', () => {
  const cases: Array<[string, string[], Record<string, unknown>]> = [
    ['Bernoulli', ['x'], {}],
    ['Multinomial', ['x'], { sample_size: 2 }],
    ['RandomNormal', [], { shape: [2, 3] }],
    ['RandomNormalLike', ['x'], {}],
    ['RandomUniform', [], { shape: [2, 3], high: f(2) }],
    ['RandomUniformLike', ['x'], {}],
  ];
  it.each(cases)('%s is refused as random, with the node named', (op, inputs, attrs) => {
    const e = refusal(op, inputs, attrs);
    expect(e).toBeInstanceOf(PleatError);
    expect(e.kind).toBe('unsupported-op');
    expect(e.message).toBe(`node 'draw_${op}': '${op}' draws random numbers, so the whole-model check cannot compare two runs`);
    expect(isRandomOp('', op)).toBe(true);
    expect(findKernel('', op, 17)).toBeUndefined();
  });
  it('an operator without a kernel that is not random keeps the generic message', () => {
    const e = refusal('NoSuchOp', ['x'], {});
    expect(e.message).toMatch(/operator ai.onnx.NoSuchOp at opset 17 is not supported by pleat's evaluator/);
    expect(isRandomOp('', 'Dropout')).toBe(false);
    expect(isRandomOp('com.example', 'RandomNormal')).toBe(false);
  });
});
