// HannWindow, HammingWindow, BlackmanWindow (opset 17): the cosine-sum windows of the ONNX operator docs'
// function bodies, w[n] = a0 - a1 cos(2 pi n / N) + a2 cos(4 pi n / N) for n in [0, size), with N = size when
// periodic = 1 (the default) and N = size - 1 otherwise. Coefficients as the function bodies give them: Hann
// (0.5, 0.5, 0), Hamming (25/46, 21/46, 0), Blackman (0.42, 0.5, 0.08). The result is cast to output_datatype
// (default FLOAT).
import { attrInt } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { Kernel, Value } from '../value.js';
import { DataType, need } from './common.js';
import { castValue } from './cast.js';
import { checkMade } from '../limits.js';

function windowKernel(op: string, a0: number, a1: number, a2: number): Kernel {
  return {
    op, domain: '', sinceVersion: 17,
    run(inputs, ctx) {
      const s = need(inputs, 0, ctx);
      if (s.data.length !== 1) throw badModel(ctx, 'size must be a scalar');
      const size = Math.trunc(s.data[0]!);
      if (size < 1) throw badModel(ctx, `size ${size} is not positive`);
      checkMade(ctx, size, 'the window');
      const periodic = attrInt(ctx.node, 'periodic', 1) !== 0;
      const N = periodic ? size : size - 1;
      const w = new Float64Array(size);
      const inc = (2 * Math.PI) / N;
      for (let n = 0; n < size; n++) {
        const a = n * inc; // n = 0 with N = 0 gives NaN, as the standard's function body does
        w[n] = a0 - a1 * Math.cos(a) + a2 * Math.cos(2 * a);
      }
      const v: Value = { type: DataType.DOUBLE, dims: [size], data: w };
      return [castValue(v, attrInt(ctx.node, 'output_datatype', DataType.FLOAT), ctx)];
    },
  };
}

export const HannWindow = windowKernel('HannWindow', 0.5, 0.5, 0);
export const HammingWindow = windowKernel('HammingWindow', 25 / 46, 21 / 46, 0);
export const BlackmanWindow = windowKernel('BlackmanWindow', 0.42, 0.5, 0.08);
