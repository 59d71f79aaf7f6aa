// RNN against onnxruntime-node (graph optimizations off) on seeded random nodes: every direction,
// sequence_lens, initial_h, clip, activation lists with alpha/beta, and layout 1 (opset 14; onnxruntime runs the
// same case at layout 0, see checkBatchMajor). Cell equation: the ONNX operator documentation's RNN definition
// (quoted in src/eval/kernels/rnn.ts); the fixed cases test_simple_rnn_* and test_rnn_seq_length of the ONNX
// backend data (onnx 1.12.0) run in conformance.test.ts.
import { describe, expect, it } from 'vitest';
import { checkBatchMajor, checkCase } from './recurrent-cases.js';
import { GraphBuilder, modelBytes } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';

describe('RNN vs onnxruntime-node', () => {
  it('bidirectional with sequence_lens (seeded shapes and attributes)', async () => {
    for (let seed = 1; seed <= 8; seed++) await checkCase('RNN', seed, 14, { direction: 'bidirectional', seqLens: true });
  });
  it('forward and reverse with clip (opset 7)', async () => {
    for (let seed = 11; seed <= 16; seed++) await checkCase('RNN', seed, 7, { direction: seed % 2 ? 'forward' : 'reverse', clip: true });
  });
  it('activation lists with alpha and beta', async () => {
    for (let seed = 21; seed <= 32; seed++) await checkCase('RNN', seed, 14, { activations: true });
  });
  it('layout 1 (batch-major) equals layout 0 with the axes moved', async () => {
    for (let seed = 41; seed <= 46; seed++) await checkBatchMajor('RNN', seed, 14, { seqLens: seed % 2 === 0 });
  });
  it('an empty sequence (sequence_lens 0) gives zero Y_h as onnxruntime does', async () => {
    for (let seed = 61; seed <= 64; seed++) await checkCase('RNN', seed, 14, { seqLens: true, zeroLength: true });
  });
  it('random mixes (opset 22)', async () => {
    for (let seed = 51; seed <= 58; seed++) await checkCase('RNN', seed, 22);
  });
});

describe('RNN activation defaults', () => {
  // ONNX operator docs (RNN, activation_alpha): "Default values are the same as of corresponding ONNX operators";
  // ThresholdedRelu's default alpha is 1.0 (ThresholdedRelu docs). onnxruntime 1.30 uses 0 here, so this is
  // checked against the docs, not against onnxruntime.
  it('ThresholdedRelu without activation_alpha uses the ONNX default alpha 1.0', () => {
    const g = new GraphBuilder();
    g.input('X', [1, 1, 3]);
    g.init('W', [1, 3, 3], [1, 0, 0, 0, 1, 0, 0, 0, 1]);
    g.init('R', [1, 3, 3], new Array(9).fill(0));
    g.output('Y');
    g.node('RNN', ['X', 'W', 'R'], { hidden_size: 3, activations: ['ThresholdedRelu'] }, { outputs: ['Y'] });
    const model = parseModel(modelBytes(g, { opset: 14 }), '.');
    const y = runModel(model, new Map([['X', { type: 1, dims: [1, 1, 3], data: Float64Array.from([0.5, 1.5, 3]) }]]), { precision: 'float64' }).get('Y')!;
    expect(Array.from(y.data)).toEqual([0, 1.5, 3]);
    g.nodes[0]!.attribute!.push({ name: 'activation_alpha', type: 6, floats: [0.25] });
    const m2 = parseModel(modelBytes(g, { opset: 14 }), '.');
    const y2 = runModel(m2, new Map([['X', { type: 1, dims: [1, 1, 3], data: Float64Array.from([0.5, 1.5, 3]) }]]), { precision: 'float64' }).get('Y')!;
    expect(Array.from(y2.data)).toEqual([0.5, 1.5, 3]);
  });
});
