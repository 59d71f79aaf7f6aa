// GRU against onnxruntime-node (graph optimizations off) on seeded random nodes: linear_before_reset 0 and 1,
// every direction, sequence_lens, initial_h, clip, activation lists with alpha/beta, and layout 1 (opset 14;
// onnxruntime runs the same case at layout 0, see checkBatchMajor). Cell equations: the ONNX operator
// documentation's GRU definition (quoted in src/eval/kernels/gru.ts); the fixed cases test_gru_* of the ONNX
// backend data (onnx 1.12.0) run in conformance.test.ts.
import { describe, it } from 'vitest';
import { checkBatchMajor, checkCase } from './recurrent-cases.js';

describe('GRU vs onnxruntime-node', () => {
  it('linear_before_reset = 1, every direction, with sequence_lens (seeded shapes and attributes)', async () => {
    for (let seed = 1; seed <= 9; seed++) {
      await checkCase('GRU', seed, 14, { linearBeforeReset: true, seqLens: true, direction: (['forward', 'reverse', 'bidirectional'] as const)[seed % 3] });
    }
  });
  it('linear_before_reset = 0 with clip (opset 7)', async () => {
    for (let seed = 11; seed <= 16; seed++) await checkCase('GRU', seed, 7, { linearBeforeReset: false, clip: true });
  });
  it('activation lists with alpha and beta', async () => {
    for (let seed = 21; seed <= 30; seed++) await checkCase('GRU', seed, 14, { activations: true });
  });
  it('layout 1 (batch-major) equals layout 0 with the axes moved', async () => {
    for (let seed = 41; seed <= 46; seed++) await checkBatchMajor('GRU', seed, 14, { seqLens: seed % 2 === 0 });
  });
  it('an empty sequence (sequence_lens 0) gives zero Y_h as onnxruntime does', async () => {
    for (let seed = 61; seed <= 64; seed++) await checkCase('GRU', seed, 14, { seqLens: true, zeroLength: true });
  });
  it('random mixes (opset 22)', async () => {
    for (let seed = 51; seed <= 58; seed++) await checkCase('GRU', seed, 22);
  });
});
