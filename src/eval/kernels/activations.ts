// Activation functions: Relu, LeakyRelu, PRelu, Elu, Selu, Celu, Clip, HardSigmoid, HardSwish, Softplus,
// ThresholdedRelu, Shrink.
// Formulas and attribute defaults are those of the ONNX operator docs.
import { attrFloat } from '../../graph/ir.js';
import { broadcastBinary, broadcastShape } from '../broadcast.js';
import type { Kernel, NumArray } from '../value.js';
import { alloc, allocLike, elementCount, need } from './common.js';
import { unaryKernel } from './unary.js';

/** A unary activation whose formula depends on the node's attributes. */
function withAttrs(op: string, make: (get: (name: string, dflt: number) => number) => (x: number) => number, sinceVersion = 1): Kernel {
  return {
    op, domain: '', sinceVersion,
    run(inputs, ctx) {
      const fn = make((name, dflt) => attrFloat(ctx.node, name, dflt));
      return unaryKernel(op, fn).run(inputs, ctx);
    },
  };
}

// Relu gets its own loop: it runs after nearly every layer, and the shared unary loop's indirect call costs
// several times the arithmetic.
export const Relu: Kernel = {
  op: 'Relu', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const src = x.data, n = src.length;
    const out = allocLike(inputs, 0, ctx, false); // may be src itself: each element is read before it is written
    reluInto(out, src, n);
    return [{ type: x.type, dims: [...x.dims], data: out }];
  },
};

// a small function of its own, so it is optimized early and stays so across runs
function reluInto(out: NumArray, src: NumArray, n: number): void {
  for (let i = 0; i < n; i++) { const v = src[i]!; out[i] = v < 0 ? 0 : v; } // NaN stays NaN
}

export const LeakyRelu = withAttrs('LeakyRelu', (get) => {
  const alpha = get('alpha', 0.01);
  return (x) => (x >= 0 ? x : alpha * x);
});

export const Elu = withAttrs('Elu', (get) => {
  const alpha = get('alpha', 1);
  return (x) => (x >= 0 ? x : alpha * Math.expm1(x));
});

export const Selu = withAttrs('Selu', (get) => {
  // defaults as printed in the ONNX operator docs (float32 values of the constants from the SELU paper)
  const alpha = get('alpha', 1.67326319217681884765625), gamma = get('gamma', 1.05070102214813232421875);
  return (x) => (x > 0 ? gamma * x : gamma * alpha * Math.expm1(x));
});

export const Celu = withAttrs('Celu', (get) => {
  const alpha = get('alpha', 1);
  return (x) => Math.max(0, x) + Math.min(0, alpha * Math.expm1(x / alpha));
}, 12);

export const ThresholdedRelu = withAttrs('ThresholdedRelu', (get) => {
  const alpha = get('alpha', 1);
  return (x) => (x > alpha ? x : 0);
}, 10);

export const Shrink = withAttrs('Shrink', (get) => {
  const lambd = get('lambd', 0.5), bias = get('bias', 0);
  return (x) => (x < -lambd ? x + bias : x > lambd ? x - bias : 0);
}, 9);

export const HardSigmoid = withAttrs('HardSigmoid', (get) => {
  const alpha = get('alpha', 0.2), beta = get('beta', 0.5);
  return (x) => Math.max(0, Math.min(1, alpha * x + beta));
});

export const HardSwish = unaryKernel('HardSwish', (x) => x * Math.max(0, Math.min(1, x / 6 + 0.5)), 14);

// log(1 + e^x) without overflow for large x
export const Softplus = unaryKernel('Softplus', (x) => (x > 0 ? x + Math.log1p(Math.exp(-x)) : Math.log1p(Math.exp(x))));

export const PRelu: Kernel = {
  op: 'PRelu', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), slope = need(inputs, 1, ctx);
    const dims = broadcastShape([x.dims, slope.dims], `node '${ctx.node.name}' (PRelu)`);
    const out = alloc(x.type, elementCount(dims), ctx);
    broadcastBinary(x.data, x.dims, slope.data, slope.dims, (v, s) => (v < 0 ? s * v : v), out, dims);
    return [{ type: x.type, dims, data: out }];
  },
};

/**
 * Clip: bounds are attributes before opset 11 and optional inputs from 11 on; a missing bound is unbounded.
 * min(max, max(min, x)) also gives the documented result when min > max: every element becomes max.
 */
export const Clip: Kernel = {
  op: 'Clip', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    let lo = -Infinity, hi = Infinity;
    if (ctx.opset < 11) {
      lo = attrFloat(ctx.node, 'min', -Infinity);
      hi = attrFloat(ctx.node, 'max', Infinity);
    } else {
      if (inputs[1]) lo = inputs[1].data[0]!;
      if (inputs[2]) hi = inputs[2].data[0]!;
    }
    return unaryKernel('Clip', (x) => Math.min(hi, Math.max(lo, x))).run(inputs, ctx);
  },
};
