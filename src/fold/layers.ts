// Reading the linear layer next to a normalization: its constant weight and bias, and the geometry a fold
// needs (channel counts, groups, transposes, padding). Weight conditions are checked here, once, for every rule.
import type { Node } from '../graph/ir.js';
import { attrFloat, attrInt, attrInts, attrString, elementCount } from '../graph/ir.js';
import { isFloatType, dataTypeName } from '../graph/tensor.js';
import { DataType } from '../graph/ir.js';
import { constantOf, labelOf, rankOf, type ConstRef, type Scope } from './scope.js';
import { refuse, type FoldContext, type Refusal } from './context.js';

export type LayerOp = 'Conv' | 'ConvTranspose' | 'Gemm' | 'MatMul';

export interface Layer {
  node: Node;
  op: LayerOp;
  label: string;
  /** The activation input (X of Conv, A of Gemm and MatMul). */
  data: string;
  weight: ConstRef;
  /** Conv/ConvTranspose B or Gemm C, when given. */
  bias?: ConstRef;
  group: number;
  /** Rank of the layer's activation input and output (undefined when the model does not say). */
  rank: number | undefined;
  outChannels: number;
  inChannels: number;
  alpha: number;
  beta: number;
  transA: boolean;
  transB: boolean;
  /** Conv only: no implicit or explicit padding of the input. */
  unpadded: boolean;
}

const INTEGER_TYPES = new Set<number>([DataType.INT8, DataType.UINT8, DataType.INT16, DataType.UINT16, DataType.INT32, DataType.INT64, DataType.UINT32, DataType.UINT64]);

const QUANTIZING = new Set(['DequantizeLinear', 'DynamicQuantizeLinear', 'QuantizeLinear']);

const isDequantized = (scope: Scope, v: string) => {
  const p = scope.ud.producer(v);
  return p !== undefined && QUANTIZING.has(p.opType);
};

function constantParam(ctx: FoldContext, scope: Scope, n: Node, v: string, what: string): ConstRef | Refusal {
  // (named as the ledger names it: an unnamed node was '' here, or its bare op type)
  if (isDequantized(scope, v)) return refuse('quantized-weights', `the ${what} of '${labelOf(scope, n)}' is dequantized at run time; fold before quantizing`);
  const ref = constantOf(scope, v);
  if (!ref) return refuse('no-linear-neighbour', `the ${what} of '${labelOf(scope, n)}' is computed at run time; store it as an initializer`);
  if (INTEGER_TYPES.has(ref.tensor.dataType)) return refuse('quantized-weights', `the ${what} '${v}' is ${dataTypeName(ref.tensor.dataType)}; fold before quantizing`);
  if (!isFloatType(ref.tensor.dataType)) return refuse('dtype-unsupported', `the ${what} '${v}' is ${dataTypeName(ref.tensor.dataType)}, which pleat cannot rewrite exactly`);
  if (ref.overridable && !ctx.allowOverridable) return refuse('overridable-weights', `'${v}' is also a graph input, so callers may replace it; remove it from the graph inputs in the export, or pass --allow-overridable if callers never do`);
  return ref;
}

const isRef = (x: ConstRef | Refusal): x is ConstRef => 'tensor' in x;

/** A layer with constant weights in a form no rule folds into (see Refusal.heldWeights). */
const heldWeights = (hint: string): Refusal => ({ ...refuse('no-linear-neighbour', hint), heldWeights: true });

/** The layer's constant weight and geometry, or why it cannot take a fold. */
export function readLayer(ctx: FoldContext, scope: Scope, n: Node): Layer | Refusal {
  const op = n.opType as LayerOp;
  const label = labelOf(scope, n);
  const [x, w, b] = n.inputs;
  if (!x || !w) return refuse('no-linear-neighbour', `'${label}' has no weight input`);
  // a MatMul or Gemm whose constant is its first operand: the weight is there, but on the side pleat does not fold
  if ((op === 'MatMul' || op === 'Gemm') && !constantOf(scope, w) && constantOf(scope, x)) {
    return heldWeights(`'${label}' takes its constant as the first operand (A) and the activations as the second; pleat folds into a constant second operand (B) only`);
  }
  const weight = constantParam(ctx, scope, n, w, 'weight');
  if (!isRef(weight)) return weight;
  let bias: ConstRef | undefined;
  if (b && op !== 'MatMul') {
    const r = constantParam(ctx, scope, n, b, 'bias');
    if (!isRef(r)) return r;
    bias = r;
  }
  if (bias && bias.tensor.dataType !== weight.tensor.dataType) {
    return refuse('dtype-unsupported', `bias and weight of '${label}' have different types`);
  }
  const dims = weight.tensor.dims;
  const group = op === 'Conv' || op === 'ConvTranspose' ? attrInt(n, 'group', 1) : 1;
  const transB = attrInt(n, 'transB', 0) === 1;
  // One literal per layer (no spread of a partial object): this runs for every layer of the model.
  const layer = (rank: number | undefined, outChannels: number, inChannels: number, unpadded: boolean, beta = attrFloat(n, 'beta', 1)): Layer => ({
    node: n, op, label, data: x, weight, bias, group, rank, outChannels, inChannels,
    alpha: attrFloat(n, 'alpha', 1), beta, transA: attrInt(n, 'transA', 0) === 1, transB, unpadded,
  });
  switch (op) {
    case 'Conv': case 'ConvTranspose': {
      if (dims.length < 3 || group < 1 || dims[0]! % group !== 0) return heldWeights(`weight of '${label}' has an unexpected shape [${dims.join(',')}]`);
      const pads = attrInts(n, 'pads') ?? [];
      const autoPad = attrString(n, 'auto_pad', 'NOTSET');
      const unpadded = pads.every((p) => p === 0) && (autoPad === 'NOTSET' || autoPad === 'VALID');
      const outChannels = op === 'Conv' ? dims[0]! : dims[1]! * group;
      const inChannels = op === 'Conv' ? dims[1]! * group : dims[0]!;
      if (bias && elementCount(bias.tensor.dims) !== outChannels) return heldWeights(`bias of '${label}' does not hold one value per output channel`);
      return layer(dims.length, outChannels, inChannels, unpadded);
    }
    case 'Gemm': {
      if (dims.length !== 2) return heldWeights(`weight of '${label}' is not a matrix`);
      const [k, nOut] = transB ? [dims[1]!, dims[0]!] : [dims[0]!, dims[1]!];
      return layer(2, nOut, k, true);
    }
    case 'MatMul': {
      if (dims.length !== 2) return heldWeights(`the weight of '${label}' is not a constant 2-D matrix`);
      const ra = rankOf(scope, x);
      return layer(ra, dims[1]!, dims[0]!, true, 1);
    }
  }
  return refuse('no-linear-neighbour', `'${label}' is not a Conv, ConvTranspose, Gemm or MatMul`);
}

export function isLayer(x: Layer | Refusal): x is Layer {
  return 'weight' in x;
}
