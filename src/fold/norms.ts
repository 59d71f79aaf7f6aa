// Normalizations whose statistics come from each input (instance, layer, group, Lp, LRN, mean-variance, and
// the layer norm and RMSNorm written as primitive ops): their statistics are never folded into weights. A
// LayerNormalization's learned tail moves as an affine step (steps.ts), so does the Mul/Add after a written-out
// one; what is left here is recognising the forms and saying why a tail stays.
import type { Node } from '../graph/ir.js';
import { attrInt, elementCount } from '../graph/ir.js';
import { tensorToFloat64 } from '../graph/tensor.js';
import { constantOf, isDefaultDomain, isLinear, rankOf, type Scope } from './scope.js';
import { perFeature } from './steps.js';

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

/** sqrt(mean(x^2) + eps) for the same x, matched at its Sqrt (x^2 as Pow(x, 2) or Mul(x, x)). */
function rmsOf(scope: Scope, v: string | undefined, x: string): boolean {
  const sqrt = producerOp(scope, v, 'Sqrt');
  const add = producerOp(scope, sqrt?.inputs[0], 'Add');
  const mean = producerOp(scope, add?.inputs[0], 'ReduceMean') ?? producerOp(scope, add?.inputs[1], 'ReduceMean');
  const sq = producerOp(scope, mean?.inputs[0], 'Pow', 'Mul');
  if (!sq || sq.inputs[0] !== x) return false;
  return sq.opType === 'Pow' || sq.inputs[1] === x;
}

/**
 * RMSNorm written out (Zhang & Sennrich 2019, "Root Mean Square Layer Normalization", arXiv:1910.07467):
 * x / sqrt(mean(x^2) + eps), or x * 1/sqrt(mean(x^2) + eps) with Reciprocal or Div(1, .), matched at the node
 * that applies it to x. Its op label for the ledger, or undefined.
 */
export function rmsChain(scope: Scope, n: Node): string | undefined {
  if (!isDefaultDomain(n) || n.inputs.length !== 2) return undefined;
  if (n.opType === 'Div') return rmsOf(scope, n.inputs[1], n.inputs[0]!) ? RMS_DIV : undefined;
  if (n.opType !== 'Mul') return undefined;
  for (const [x, r] of [[n.inputs[0]!, n.inputs[1]!], [n.inputs[1]!, n.inputs[0]!]]) {
    const rec = producerOp(scope, r, 'Reciprocal', 'Div');
    if (!rec) continue;
    if (rec.opType === 'Reciprocal' && rmsOf(scope, rec.inputs[0], x)) return RMS_RECIPROCAL;
    const one = rec.opType === 'Div' ? constantOf(scope, rec.inputs[0]!) : undefined;
    if (one && elementCount(one.tensor.dims) === 1 && tensorToFloat64(one.tensor)[0] === 1 && rmsOf(scope, rec.inputs[1], x)) return RMS_RECIPROCAL;
  }
  return undefined;
}

export const RMS_DIV = 'Pow/ReduceMean/Add/Sqrt/Div';
export const RMS_RECIPROCAL = 'Pow/ReduceMean/Add/Sqrt/Reciprocal/Mul';

/** A normalization written out as primitive ops (layer norm or RMSNorm): its ledger op label, or undefined. */
export function writtenOutNorm(scope: Scope, n: Node): string | undefined {
  return isPrimitiveChain(scope, n) ? PRIMITIVE_CHAIN : rmsChain(scope, n);
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
  if (n.opType === 'LayerNormalization' && isDefaultDomain(n)) return layerNormHint(scope, n);
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

/** A fused LayerNormalization whose Scale and B did not become a step (see steps.ts): why, in words. */
function layerNormHint(scope: Scope, n: Node): string {
  const [, sName, bName] = n.inputs;
  const refs = [sName, bName].filter((v): v is string => !!v).map((v) => ({ v, r: constantOf(scope, v) }));
  const computed = refs.find((x) => !x.r);
  if (computed) return `statistics come from each input and always stay; its '${computed.v}' is computed at run time, so its scale and shift cannot move; store it as an initializer`;
  if (refs.some((x) => !perFeature(x.r!.tensor.dims, rankOf(scope, n.inputs[0]!)))) return 'statistics come from each input and always stay; its Scale spans several axes, so it is no per-feature vector a linear layer could take';
  for (let i = 1; i < n.outputs.length; i++) {
    if (n.outputs[i]) return `statistics come from each input and always stay; its Mean or InvStdDev output is read, so it is left as exported`;
  }
  return 'statistics come from each input and always stay; its Scale is all ones and it has no shift, so nothing is left to move';
}

/** A runtime-statistics normalization, or undefined. */
export function runtimeNorm(scope: Scope, n: Node): RuntimeNorm | undefined {
  if (!isDefaultDomain(n) && n.domain !== 'com.microsoft') return undefined;
  if (RUNTIME.has(n.opType)) {
    if (WITH_TAIL.has(n.opType)) return { op: n.opType, hint: tailHint(scope, n) };
    return { op: n.opType, hint: 'statistics come from each input and it has no learned scale or bias; nothing to fold' };
  }
  const written = writtenOutNorm(scope, n);
  if (written) {
    return { op: written, hint: 'statistics come from each input (written as primitive ops) and always stay; a constant per-feature Mul/Add right after it moves into the linear layers that read it, when every reader is one' };
  }
  return undefined;
}
