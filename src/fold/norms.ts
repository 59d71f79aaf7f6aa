// Normalizations whose statistics come from each input (instance, layer, group, Lp, LRN, mean-variance, and
// the layer norm written as primitive ops): never folded into weights, but listed with what their learned
// affine tail could do.
import type { Node } from '../graph/ir.js';
import { attrInt } from '../graph/ir.js';
import { isDefaultDomain, isLinear, rankOf, type Scope } from './scope.js';

export const PRIMITIVE_CHAIN = 'ReduceMean/Sub/Pow/ReduceMean/Add/Sqrt/Div';

const RUNTIME = new Set(['InstanceNormalization', 'LayerNormalization', 'GroupNormalization', 'LpNormalization', 'LRN', 'MeanVarianceNormalization']);
const WITH_TAIL = new Set(['InstanceNormalization', 'LayerNormalization', 'GroupNormalization']);

export interface RuntimeNorm {
  op: string;
  hint: string;
}

function producerOp(scope: Scope, v: string | undefined, ...ops: string[]): Node | undefined {
  if (!v) return undefined;
  const p = scope.ud.producer(v);
  return p && isDefaultDomain(p) && ops.includes(p.opType) ? p : undefined;
}

/** (x - mean(x)) / sqrt(mean((x - mean(x))^2) + eps), matched at its Div. */
export function isPrimitiveChain(scope: Scope, n: Node): boolean {
  if (n.opType !== 'Div' || !isDefaultDomain(n)) return false;
  const sub = producerOp(scope, n.inputs[0], 'Sub');
  if (!sub || !producerOp(scope, sub.inputs[1], 'ReduceMean')) return false;
  const sqrt = producerOp(scope, n.inputs[1], 'Sqrt');
  const add = producerOp(scope, sqrt?.inputs[0], 'Add');
  const mean = producerOp(scope, add?.inputs[0], 'ReduceMean') ?? producerOp(scope, add?.inputs[1], 'ReduceMean');
  return producerOp(scope, mean?.inputs[0], 'Pow', 'Mul') !== undefined;
}

/** Which axis a learned tail scales, counted from the end, when it is known. */
function tailAxisFromEnd(scope: Scope, n: Node): number | undefined {
  if (n.opType === 'LayerNormalization') {
    const axis = attrInt(n, 'axis', -1);
    const r = rankOf(scope, n.inputs[0]!);
    if (axis === -1 || (r !== undefined && axis === r - 1)) return 0;
    return undefined;
  }
  const r = rankOf(scope, n.inputs[0]!);
  return r === undefined ? undefined : r - 2; // channel axis 1
}

function tailHint(scope: Scope, n: Node): string {
  const out = n.outputs[0]!;
  const readers = scope.ud.consumers(out);
  const next = readers.length === 1 && !scope.ud.isGraphOutput(out) ? readers[0]! : undefined;
  if (!next || !isLinear(next) || next.inputs[0] !== out) {
    return 'statistics come from each input; its learned scale and bias have no single linear layer after it to fold into';
  }
  const at = tailAxisFromEnd(scope, n);
  const contracts = next.opType === 'Conv' ? at !== undefined && at === (rankOf(scope, out) ?? 0) - 2 : next.opType === 'ConvTranspose' ? false : at === 0;
  const name = next.name || next.opType;
  return contracts
    ? `statistics come from each input; its learned scale and bias could fold into '${name}' if exported as a separate Mul and Add`
    : `statistics come from each input; its learned scale and bias are not on the axis '${name}' reads, so they cannot fold there`;
}

/** A runtime-statistics normalization, or undefined. */
export function runtimeNorm(scope: Scope, n: Node): RuntimeNorm | undefined {
  if (!isDefaultDomain(n) && n.domain !== 'com.microsoft') return undefined;
  if (RUNTIME.has(n.opType)) {
    if (WITH_TAIL.has(n.opType)) return { op: n.opType, hint: tailHint(scope, n) };
    return { op: n.opType, hint: 'statistics come from each input and it has no learned scale or bias; nothing to fold' };
  }
  if (isPrimitiveChain(scope, n)) {
    return { op: PRIMITIVE_CHAIN, hint: 'statistics come from each input (written as primitive ops); a constant Mul/Add after it folds on its own when a linear layer follows' };
  }
  return undefined;
}
