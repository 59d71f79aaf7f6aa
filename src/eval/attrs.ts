// Small helpers shared by kernels: typed output buffers in the run's precision, input checks, attribute
// errors that name the node, and the spatial geometry (pads, strides, dilations, auto_pad) of Conv and pooling.
import { PleatError } from '../errors.js';
import { attrInts, attrString, elementCount, type Node } from '../graph/ir.js';
import { windowCount } from '../graph/shapes.js';
import type { KernelContext, NumArray, Precision, Value } from './value.js';
import { takeFloat32, takeFloat64 } from './pool.js';

/**
 * A float buffer in the run's precision (reused from the evaluator's pool when one is free), zeroed unless
 * `zero` is false, which kernels that write every element pass to save a pass over memory.
 */
export function allocFloat(n: number, precision: Precision, zero = true): NumArray {
  return precision === 'float32' ? takeFloat32(n, zero) : takeFloat64(n, zero);
}

/** A float result value of `type` (the node's float element type) in the run's precision. */
export function floatValue(type: number, dims: number[], precision: Precision): Value {
  return { type, dims, data: allocFloat(elementCount(dims), precision) };
}

export function nodeLabel(node: Node): string {
  return `node '${node.name || '(unnamed)'}' (${node.opType})`;
}

/** The input at index i, or a bad-model error naming the node when it is missing. */
export function need(inputs: Array<Value | undefined>, i: number, ctx: KernelContext, what: string): Value {
  const v = inputs[i];
  if (!v) throw new PleatError('bad-model', `${nodeLabel(ctx.node)}: required input ${i} (${what}) is missing`);
  return v;
}

/** An unsupported operator form: one line naming op, node and opset. */
export function unsupported(ctx: KernelContext, what: string): PleatError {
  const dom = ctx.node.domain || 'ai.onnx';
  return new PleatError('unsupported-op', `node '${ctx.node.name || '(unnamed)'}': ${dom}.${ctx.node.opType} at opset ${ctx.opset}: ${what} is not supported by pleat's evaluator`);
}

export function badModel(ctx: KernelContext, what: string): PleatError {
  return new PleatError('bad-model', `${nodeLabel(ctx.node)}: ${what}`);
}

/** Integer list attribute with a default, checked for length. */
export function intsOr(ctx: KernelContext, name: string, dflt: number[], len?: number): number[];
export function intsOr(ctx: KernelContext, name: string, dflt: undefined, len?: number): number[] | undefined;
export function intsOr(ctx: KernelContext, name: string, dflt: number[] | undefined, len?: number): number[] | undefined {
  const v = attrInts(ctx.node, name);
  if (v === undefined) return dflt;
  if (len !== undefined && v.length !== len) throw badModel(ctx, `attribute ${name} has ${v.length} values, expected ${len}`);
  return v;
}

/** Normalize a possibly negative axis against rank. */
export function normAxis(ctx: KernelContext, axis: number, rank: number): number {
  const a = axis < 0 ? axis + rank : axis;
  if (a < 0 || a >= rank) throw badModel(ctx, `axis ${axis} is out of range for rank ${rank}`);
  return a;
}

/** Spatial geometry of a sliding-window operator over `in` spatial dims. */
export interface Window {
  kernel: number[];
  strides: number[];
  dilations: number[];
  padBegin: number[];
  padEnd: number[];
  out: number[];
}

const ONES = [0, 1, 2, 3].map((r) => Object.freeze(new Array<number>(r).fill(1)));
const ZEROS = [0, 1, 2, 3, 4, 5, 6].map((r) => Object.freeze(new Array<number>(r).fill(0)));
const ones = (r: number): number[] => (ONES[r] as number[] | undefined) ?? new Array<number>(r).fill(1);
const zeros = (r: number): number[] => (ZEROS[r] as number[] | undefined) ?? new Array<number>(r).fill(0);

/**
 * Resolve kernel/strides/dilations/pads/auto_pad into output sizes (ONNX Conv and pooling formulas).
 * `ceil` is the pooling ceil_mode. Pads for SAME_* follow the operator docs: total = max(0, (out-1)*s + dk - in),
 * SAME_UPPER puts the extra one at the end, SAME_LOWER at the beginning.
 */
export function slidingWindow(ctx: KernelContext, inDims: number[], kernel: number[], ceil = false): Window {
  const r = inDims.length;
  if (kernel.length !== r) throw badModel(ctx, `kernel_shape has ${kernel.length} values for ${r} spatial axes`);
  // (absent attributes take shared, frozen defaults: this runs once per node per probe)
  const strides = intsOr(ctx, 'strides', undefined, r) ?? ones(r);
  const dilations = intsOr(ctx, 'dilations', undefined, r) ?? ones(r);
  const pads = intsOr(ctx, 'pads', undefined, 2 * r) ?? zeros(2 * r);
  const autoPad = attrString(ctx.node, 'auto_pad', 'NOTSET');
  const padBegin = pads.slice(0, r), padEnd = pads.slice(r);
  const out: number[] = [];
  for (let i = 0; i < r; i++) {
    const dk = (kernel[i]! - 1) * dilations[i]! + 1;
    const n = inDims[i]!, s = strides[i]!;
    if (s < 1 || dilations[i]! < 1) throw badModel(ctx, 'strides and dilations must be positive');
    switch (autoPad) {
      case 'NOTSET': case '': {
        out.push(windowCount(n, dk, s, padBegin[i]!, padEnd[i]!, ceil));
        break;
      }
      case 'VALID': {
        padBegin[i] = 0; padEnd[i] = 0;
        out.push(windowCount(n, dk, s, 0, 0, ceil));
        break;
      }
      case 'SAME_UPPER': case 'SAME_LOWER': {
        const o = Math.ceil(n / s);
        const total = Math.max(0, (o - 1) * s + dk - n);
        const small = Math.floor(total / 2);
        padBegin[i] = autoPad === 'SAME_UPPER' ? small : total - small;
        padEnd[i] = total - padBegin[i]!;
        out.push(o);
        break;
      }
      default: throw unsupported(ctx, `auto_pad '${autoPad}'`);
    }
    if (out[i]! < 1) throw badModel(ctx, `input spatial size ${n} is too small for kernel ${kernel[i]} (dilation ${dilations[i]}, pads ${padBegin[i]}+${padEnd[i]})`);
  }
  return { kernel, strides, dilations, padBegin, padEnd, out };
}

/** Element i (0 to 2) of a spatial list (1-D/2-D/3-D) padded to three axes with `fill` in front, without the padded copy. */
export function axis3(v: readonly number[], i: number, fill: number): number {
  const k = i - (3 - v.length);
  return k >= 0 ? v[k]! : fill;
}

/** Pad a spatial list (1-D/2-D/3-D) to three axes by putting size-1 axes in front. */
export function to3(v: readonly number[], fill: number): [number, number, number] {
  return [axis3(v, 0, fill), axis3(v, 1, fill), axis3(v, 2, fill)];
}
