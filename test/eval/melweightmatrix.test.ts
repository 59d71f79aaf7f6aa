// MelWeightMatrix against onnxruntime-node (graph optimizations off) on seeded random filter banks: mel bin
// counts, DFT lengths, sample rates and band edges below the Nyquist frequency. Computation: the ONNX backend
// test case melweightmatrix.py (onnx 1.12.0), whose fixed case test_melweightmatrix runs in conformance.test.ts.
import { describe, it } from 'vitest';
import { rng, T, vsOrt } from './ort-compare.js';

describe('MelWeightMatrix vs onnxruntime-node', () => {
  it('random filter banks (seeded)', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed);
      const mels = 1 + Math.floor(r() * 12);
      const dft = 8 + Math.floor(r() * 120);
      const rate = [8000, 16000, 22050, 44100][seed % 4]!;
      const upper = Math.floor((0.3 + 0.7 * r()) * (rate / 2));
      const lower = Math.floor(r() * 0.3 * upper);
      await vsOrt('MelWeightMatrix', 17, [
        { name: 'mels', dims: [], data: [mels], type: T.INT64, init: true },
        { name: 'dft', dims: [], data: [dft], type: T.INT64, init: true },
        { name: 'rate', dims: [], data: [rate], type: T.INT64, init: true },
        { name: 'lower', dims: [], data: [lower], init: true },
        { name: 'upper', dims: [], data: [upper], init: true },
      ], seed % 3 === 0 ? { output_datatype: T.DOUBLE } : {}, [{ name: 'y', type: seed % 3 === 0 ? T.DOUBLE : T.FLOAT }], 1e-6);
    }
  });
});
