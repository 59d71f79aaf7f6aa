// DFT against onnxruntime-node (graph optimizations off) on seeded random signals: opset 17 (axis attribute) and
// opset 20 (axis input, negative axes), real and complex input, inverse, onesided, dft_length padding and
// cutting. Semantics: ONNX operator docs (DFT); the fixed cases test_dft* of the ONNX backend data (onnx
// 1.12.0, values from numpy.fft) run in conformance.test.ts.
import { describe, it } from 'vitest';
import { count, randn, rng, T, vsOrt, type In } from './ort-compare.js';

function signal(r: () => number, complex: boolean): { dims: number[]; data: Float32Array } {
  const rank = 1 + Math.floor(r() * 2); // signal axes after the batch axis
  const dims = [1 + Math.floor(r() * 2), ...Array.from({ length: rank }, () => 1 + Math.floor(r() * 9)), complex ? 2 : 1];
  return { dims, data: randn(r, count(dims)) };
}

describe('DFT vs onnxruntime-node', () => {
  it('opset 17: axis attribute, inverse, onesided and dft_length (seeded)', async () => {
    for (let seed = 1; seed <= 16; seed++) {
      const r = rng(seed);
      const inverse = seed % 4 === 1 ? 1 : 0;
      const onesided = !inverse && seed % 3 === 0 ? 1 : 0;
      const x = signal(r, !onesided && r() < 0.5);
      const axis = 1 + Math.floor(r() * (x.dims.length - 2));
      const ins: In[] = [{ name: 'x', ...x }];
      if (seed % 2 === 0) ins.push({ name: 'len', dims: [], data: [1 + Math.floor(r() * 12)], type: T.INT64, init: true });
      await vsOrt('DFT', 17, ins, { axis, inverse, onesided }, [{ name: 'y' }], 2e-5);
    }
  });
  it('opset 20: axis input with negative values, inverse, onesided and dft_length (seeded)', async () => {
    for (let seed = 21; seed <= 36; seed++) {
      const r = rng(seed);
      const inverse = seed % 4 === 1 ? 1 : 0;
      const onesided = !inverse && seed % 3 === 0 ? 1 : 0;
      const x = signal(r, !onesided && r() < 0.5);
      const rank = x.dims.length;
      const pos = 1 + Math.floor(r() * (rank - 2));
      const axis = r() < 0.5 ? pos - rank : pos;
      const ins: In[] = [{ name: 'x', ...x }];
      ins.push(seed % 2 === 0 ? { name: 'len', dims: [], data: [1 + Math.floor(r() * 12)], type: T.INT64, init: true } : { name: '', dims: [], data: [] });
      if (seed % 5 !== 0 || axis !== -2) ins.push({ name: 'axis', dims: [], data: [axis], type: T.INT64, init: true });
      await vsOrt('DFT', 20, ins, { inverse, onesided }, [{ name: 'y' }], 2e-5);
    }
  });
});
