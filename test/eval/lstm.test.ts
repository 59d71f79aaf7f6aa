// LSTM against onnxruntime-node (graph optimizations off) on seeded random nodes: every direction, sequence_lens,
// initial_h/initial_c, peepholes, clip, activation lists with alpha/beta, input_forget, and layout 1 (opset 14;
// onnxruntime runs the same case at layout 0, see checkBatchMajor). Cell equations: the ONNX operator
// documentation's LSTM definition (quoted in src/eval/kernels/lstm.ts); the fixed cases test_lstm_* of the ONNX
// backend data (onnx 1.12.0) run in conformance.test.ts.
import { describe, it } from 'vitest';
import { checkBatchMajor, checkCase } from './recurrent-cases.js';

describe('LSTM vs onnxruntime-node', () => {
  it('bidirectional with sequence_lens (seeded shapes and attributes)', async () => {
    for (let seed = 1; seed <= 8; seed++) await checkCase('LSTM', seed, 14, { direction: 'bidirectional', seqLens: true });
  });
  it('forward and reverse with peepholes, initial states and clip (opset 7)', async () => {
    for (let seed = 11; seed <= 16; seed++) await checkCase('LSTM', seed, 7, { direction: seed % 2 ? 'forward' : 'reverse', peepholes: true, clip: true });
  });
  it('activation lists with alpha and beta', async () => {
    for (let seed = 21; seed <= 30; seed++) await checkCase('LSTM', seed, 14, { activations: true });
  });
  it('input_forget couples the forget gate to the input gate', async () => {
    for (let seed = 31; seed <= 34; seed++) await checkCase('LSTM', seed, 14, { inputForget: true });
  });
  it('layout 1 (batch-major) equals layout 0 with the axes moved', async () => {
    for (let seed = 41; seed <= 46; seed++) await checkBatchMajor('LSTM', seed, 14, { seqLens: seed % 2 === 0 });
  });
  it('an empty sequence (sequence_lens 0) gives zero Y_h, Y_c as onnxruntime does', async () => {
    for (let seed = 61; seed <= 64; seed++) await checkCase('LSTM', seed, 14, { seqLens: true, zeroLength: true });
  });
  it('random mixes (opset 22)', async () => {
    for (let seed = 51; seed <= 58; seed++) await checkCase('LSTM', seed, 22);
  });
});
