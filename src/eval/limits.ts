// Bounds on work a model can demand of one kernel through small inputs: an Einsum over many large labels, a
// DFT length, a window size. Past them the evaluator refuses (PleatError 'unsupported-op', naming the node)
// instead of running for hours or exhausting memory on a crafted file. Loop's iteration bound lives in
// kernels/loop.ts.
import { PleatError } from '../errors.js';
import { nodeLabel } from './attrs.js';
import type { KernelContext } from './value.js';

/** Inner-loop steps one node may take (about ten seconds of plain arithmetic). */
export const MAX_KERNEL_STEPS = 1e10;

/** Elements a node may create from a scalar size input (a float64 buffer of 1 GiB). */
export const MAX_MADE_ELEMENTS = 2 ** 27;

export function checkSteps(ctx: KernelContext, steps: number, what: string): void {
  if (steps > MAX_KERNEL_STEPS) {
    throw new PleatError('unsupported-op', `${nodeLabel(ctx.node)}: ${what} takes ${steps.toExponential(2)} steps, past pleat's evaluator's bound of ${MAX_KERNEL_STEPS.toExponential(0)} for one node`);
  }
}

export function checkMade(ctx: KernelContext, n: number, what: string): void {
  if (n > MAX_MADE_ELEMENTS) {
    throw new PleatError('unsupported-op', `${nodeLabel(ctx.node)}: ${what} would hold ${n} elements, past pleat's evaluator's bound of ${MAX_MADE_ELEMENTS} for a tensor sized by an input value`);
  }
}
