// Comparisons and boolean logic (Equal, Less, Greater, LessOrEqual, GreaterOrEqual, And, Or, Xor, Not) and
// Where, IsNaN, IsInf. Results are BOOL tensors holding 0/1; any non-zero input counts as true.
import { broadcastBinary, broadcastNary, broadcastShape } from '../broadcast.js';
import { attrInt } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { pairDims } from './binary.js';
import { DataType, alloc, elementCount, need } from './common.js';

type Fn = (x: number, y: number) => number;

function boolOp(op: string, fn: Fn, sinceVersion = 1): Kernel {
  return {
    op, domain: '', sinceVersion,
    run(inputs, ctx) {
      const a = need(inputs, 0, ctx), b = need(inputs, 1, ctx);
      const { bDims, dims } = pairDims(a, b, ctx);
      const out = new Float64Array(elementCount(dims));
      broadcastBinary(a.data, a.dims, b.data, bDims, fn, out, dims);
      return [{ type: DataType.BOOL, dims, data: out }];
    },
  };
}

export const Equal = boolOp('Equal', (x, y) => (x === y ? 1 : 0));
export const Less = boolOp('Less', (x, y) => (x < y ? 1 : 0));
export const Greater = boolOp('Greater', (x, y) => (x > y ? 1 : 0));
export const LessOrEqual = boolOp('LessOrEqual', (x, y) => (x <= y ? 1 : 0), 12);
export const GreaterOrEqual = boolOp('GreaterOrEqual', (x, y) => (x >= y ? 1 : 0), 12);
export const And = boolOp('And', (x, y) => (x !== 0 && y !== 0 ? 1 : 0));
export const Or = boolOp('Or', (x, y) => (x !== 0 || y !== 0 ? 1 : 0));
export const Xor = boolOp('Xor', (x, y) => ((x !== 0) !== (y !== 0) ? 1 : 0));

export const Not: Kernel = {
  op: 'Not', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const out = new Float64Array(x.data.length);
    for (let i = 0; i < out.length; i++) out[i] = x.data[i] === 0 ? 1 : 0;
    return [{ type: DataType.BOOL, dims: [...x.dims], data: out }];
  },
};

export const Where: Kernel = {
  op: 'Where', domain: '', sinceVersion: 9,
  run(inputs, ctx): Value[] {
    const c = need(inputs, 0, ctx), x = need(inputs, 1, ctx), y = need(inputs, 2, ctx);
    const dims = broadcastShape([c.dims, x.dims, y.dims], `node '${ctx.node.name}' (Where)`);
    const out = alloc(x.type, elementCount(dims), ctx);
    broadcastNary([c, x, y], (v) => (v[0] !== 0 ? v[1]! : v[2]!), out, dims);
    return [{ type: x.type, dims, data: out }];
  },
};

/** A BOOL result that tests each element; `make` reads the node's attributes. */
function predicate(op: string, sinceVersion: number, make: (ctx: KernelContext) => (x: number) => boolean): Kernel {
  return {
    op, domain: '', sinceVersion,
    run(inputs, ctx) {
      const x = need(inputs, 0, ctx);
      const fn = make(ctx);
      const out = new Float64Array(x.data.length);
      for (let i = 0; i < out.length; i++) out[i] = fn(x.data[i]!) ? 1 : 0;
      return [{ type: DataType.BOOL, dims: [...x.dims], data: out }];
    },
  };
}

export const IsNaN = predicate('IsNaN', 9, () => Number.isNaN);
export const IsInf = predicate('IsInf', 10, (ctx) => {
  const neg = attrInt(ctx.node, 'detect_negative', 1) === 1, pos = attrInt(ctx.node, 'detect_positive', 1) === 1;
  return (x) => (x === Infinity && pos) || (x === -Infinity && neg);
});
