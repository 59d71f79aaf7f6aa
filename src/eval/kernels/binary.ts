// Add, Sub, Mul, Div, Pow, Mod: elementwise arithmetic with numpy-style broadcasting (opset >= 7) or the legacy
// `broadcast`/`axis` attributes (opset < 7). Integer tensors keep integer semantics: Div truncates toward zero
// and results wrap to the element type, as the ONNX operator docs describe for C-style integer arithmetic.
import { broadcastBinary, broadcastShape } from '../broadcast.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { DataType, attrInt } from '../../graph/ir.js';
import { alloc, badModel, isIntegerType, need, wrapAll } from './common.js';

type Fn = (x: number, y: number) => number;

/** Dims of B as seen by the legacy (opset < 7) broadcast: B's axes sit at `axis` of A, padded with 1s. */
function legacyDims(a: Value, b: Value, ctx: KernelContext): number[] {
  if (attrInt(ctx.node, 'broadcast', 0) !== 1) {
    if (a.dims.join(',') !== b.dims.join(',')) throw badModel(ctx, `shapes [${a.dims}] and [${b.dims}] differ and broadcast=0`);
    return b.dims;
  }
  const rank = a.dims.length;
  const axis = attrInt(ctx.node, 'axis', rank - b.dims.length);
  const dims = new Array<number>(rank).fill(1);
  for (let i = 0; i < b.dims.length; i++) dims[axis + i] = b.dims[i]!;
  return dims;
}

/** B's dims as the op reads them, and the output dims, for a two-input broadcasting op. */
export function pairDims(a: Value, b: Value, ctx: KernelContext): { bDims: number[]; dims: number[] } {
  const bDims = ctx.opset < 7 ? legacyDims(a, b, ctx) : b.dims;
  return { bDims, dims: broadcastShape([a.dims, bDims], `node '${ctx.node.name}' (${ctx.node.opType})`) };
}

/** Apply fn over the broadcast of inputs 0 and 1; the result has the element type of input 0. */
export function elementwise(inputs: Array<Value | undefined>, ctx: KernelContext, floatFn: Fn, intFn: Fn = floatFn): Value {
  const a = need(inputs, 0, ctx), b = need(inputs, 1, ctx);
  const { bDims, dims } = pairDims(a, b, ctx);
  const out = alloc(a.type, dims.reduce((p, q) => p * q, 1), ctx);
  const integer = isIntegerType(a.type);
  broadcastBinary(a.data, a.dims, b.data, bDims, integer ? intFn : floatFn, out, dims);
  if (integer) wrapAll(a.type, out);
  return { type: a.type, dims, data: out };
}

function arith(op: string, floatFn: Fn, intFn?: Fn): Kernel {
  return { op, domain: '', sinceVersion: 1, run: (inputs, ctx) => [elementwise(inputs, ctx, floatFn, intFn)] };
}

const divInt: Fn = (x, y) => (y === 0 ? 0 : Math.trunc(x / y)); // integer division by zero is undefined in ONNX; pleat yields 0
const powInt: Fn = (x, y) => Math.trunc(Math.pow(x, y));

export const Add = arith('Add', (x, y) => x + y);
export const Sub = arith('Sub', (x, y) => x - y);
// Math.imul gives the exact low 32 bits of a product of types up to 32 bits, where a double product of two large
// int32 values would round before wrapping; int64 products stay exact below 2^53.
export const Mul: Kernel = {
  op: 'Mul', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const t = inputs[0]?.type;
    const narrow = t !== undefined && isIntegerType(t) && t !== DataType.INT64 && t !== DataType.UINT64;
    return [elementwise(inputs, ctx, (x, y) => x * y, narrow ? Math.imul : (x, y) => x * y)];
  },
};
export const Div = arith('Div', (x, y) => x / y, divInt);
export const Pow = arith('Pow', Math.pow, powInt);

/**
 * Mod: fmod=1 is C fmod (the result takes the dividend's sign); fmod=0 is integer modulo whose result takes the
 * divisor's sign, as the ONNX Mod docs describe.
 */
export const Mod: Kernel = {
  op: 'Mod', domain: '', sinceVersion: 10,
  run(inputs, ctx) {
    if (attrInt(ctx.node, 'fmod', 0) === 1) return [elementwise(inputs, ctx, (x, y) => x % y)];
    if (!isIntegerType(need(inputs, 0, ctx).type)) throw badModel(ctx, 'floating-point Mod needs fmod=1 (ONNX Mod docs)');
    const floorMod: Fn = (x, y) => {
      if (y === 0) return 0; // undefined in ONNX, as for integer Div
      const r = x % y;
      return r !== 0 && r < 0 !== y < 0 ? r + y : r;
    };
    return [elementwise(inputs, ctx, floorMod)];
  },
};
