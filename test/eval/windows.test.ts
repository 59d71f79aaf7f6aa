// HannWindow, HammingWindow and BlackmanWindow against onnxruntime-node (graph optimizations off): sizes 1-40,
// periodic 0 and 1, float, double and int32 outputs (output_datatype). Formulas: the ONNX operator docs'
// function bodies (see src/eval/kernels/windows.ts); the fixed cases test_*window* of the ONNX backend data
// (onnx 1.12.0) run in conformance.test.ts.
import { describe, it } from 'vitest';
import { T, vsOrt } from './ort-compare.js';

describe('window functions vs onnxruntime-node', () => {
  for (const op of ['HannWindow', 'HammingWindow', 'BlackmanWindow']) {
    it(`${op}: sizes, periodic and output_datatype`, async () => {
      for (const size of [2, 3, 7, 16, 40]) {
        for (const periodic of [0, 1]) {
          await vsOrt(op, 17, [{ name: 'size', dims: [], data: [size], type: T.INT64, init: true }], { periodic }, [{ name: 'y' }], 1e-6);
        }
      }
      await vsOrt(op, 17, [{ name: 'size', dims: [], data: [9], type: T.INT32, init: true }], { output_datatype: T.DOUBLE }, [{ name: 'y', type: T.DOUBLE }], 1e-6);
      await vsOrt(op, 17, [{ name: 'size', dims: [], data: [1], type: T.INT64, init: true }], {}, [{ name: 'y' }], 1e-6);
    });
  }
});
