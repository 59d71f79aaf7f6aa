// Maps (domain, op, opset) to a kernel module. Adding an operator: write src/eval/kernels/<op>.ts exporting a
// `Kernel` (or several, one per opset form) and add it to KERNELS below.
import { PleatError } from '../errors.js';
import type { Kernel } from './value.js';
import { isRandomOp } from './kernel-table.js';
import * as activations from './kernels/activations.js';
import * as binary from './kernels/binary.js';
import * as cast from './kernels/cast.js';
import * as concat from './kernels/concat.js';
import * as constant from './kernels/constant.js';
import * as expand from './kernels/expand.js';
import * as gather from './kernels/gather.js';
import * as identity from './kernels/identity.js';
import * as logic from './kernels/logic.js';
import * as reduce from './kernels/reduce.js';
import * as reshape from './kernels/reshape.js';
import * as shape from './kernels/shape.js';
import * as slice from './kernels/slice.js';
import * as softmax from './kernels/softmax.js';
import * as transpose from './kernels/transpose.js';
import * as unary from './kernels/unary.js';
import * as variadic from './kernels/variadic.js';
import { Conv } from './kernels/conv.js';
import { ConvTranspose } from './kernels/convtranspose.js';
import { BatchNormalization } from './kernels/batchnormalization.js';
import { InstanceNormalization } from './kernels/instancenormalization.js';
import { LayerNormalization } from './kernels/layernormalization.js';
import { GroupNormalization } from './kernels/groupnormalization.js';
import { Gemm } from './kernels/gemm.js';
import { MatMul } from './kernels/matmul.js';
import * as pool from './kernels/pool.js';
import { LpPool } from './kernels/lppool.js';
import { GlobalLpPool } from './kernels/globallppool.js';
import { PadV1, PadV11 } from './kernels/pad.js';
import * as resize from './kernels/resize.js';
import { If } from './kernels/if.js';
import { QuantizeLinear } from './kernels/quantizelinear.js';
import { DequantizeLinear } from './kernels/dequantizelinear.js';
import { DynamicQuantizeLinear } from './kernels/dynamicquantizelinear.js';
import { ConvInteger } from './kernels/convinteger.js';
import { MatMulInteger } from './kernels/matmulinteger.js';
import { QLinearConv } from './kernels/qlinearconv.js';
import { QLinearMatMul } from './kernels/qlinearmatmul.js';
import { TopK1, TopK10 } from './kernels/topk.js';
import { GatherElements } from './kernels/gatherelements.js';
import { GatherND } from './kernels/gathernd.js';
import { ScatterElements, Scatter } from './kernels/scatterelements.js';
import { ScatterND } from './kernels/scatternd.js';
import { OneHot } from './kernels/onehot.js';
import { Trilu } from './kernels/trilu.js';
import { NonZero } from './kernels/nonzero.js';
import { Compress } from './kernels/compress.js';
import { Unique } from './kernels/unique.js';
import { EyeLike } from './kernels/eyelike.js';
import { DepthToSpace, SpaceToDepth } from './kernels/depthtospace.js';
import { LRN } from './kernels/lrn.js';
import { MeanVarianceNormalization } from './kernels/meanvariancenormalization.js';
import { MaxUnpool } from './kernels/maxunpool.js';
import { ReverseSequence } from './kernels/reversesequence.js';
import { RoiAlign } from './kernels/roialign.js';
import { GridSample } from './kernels/gridsample.js';
import { NonMaxSuppression } from './kernels/nonmaxsuppression.js';
import { BitShift } from './kernels/bitshift.js';
import { Det } from './kernels/det.js';
import { TfIdfVectorizer } from './kernels/tfidfvectorizer.js';
import { LSTM } from './kernels/lstm.js';
import { GRU } from './kernels/gru.js';
import { RNN } from './kernels/rnn.js';
import { Loop } from './kernels/loop.js';
import { Scan8, Scan9 } from './kernels/scan.js';
import { Einsum } from './kernels/einsum.js';
import { CumSum } from './kernels/cumsum.js';
import { DFT17, DFT20 } from './kernels/dft.js';
import { STFT } from './kernels/stft.js';
import * as windows from './kernels/windows.js';
import { MelWeightMatrix } from './kernels/melweightmatrix.js';

const KERNELS: Kernel[] = [
  // (kernels are registered here, one line each)
  binary.Add,
  binary.Sub,
  binary.Mul,
  binary.Div,
  binary.Pow,
  unary.Sqrt,
  unary.Exp,
  unary.Log,
  unary.Neg,
  unary.Abs,
  unary.Reciprocal,
  unary.Erf,
  unary.Floor,
  unary.Ceil,
  unary.Tanh,
  unary.Sigmoid,
  unary.Sign,
  activations.Relu,
  activations.LeakyRelu,
  activations.PRelu,
  activations.Elu,
  activations.Selu,
  activations.Clip,
  activations.HardSigmoid,
  activations.HardSwish,
  activations.Softplus,
  softmax.Softmax,
  softmax.LogSoftmax,
  reshape.Flatten,
  reshape.Reshape,
  reshape.Squeeze,
  reshape.Unsqueeze,
  transpose.Transpose,
  concat.Concat,
  concat.Split,
  slice.Slice,
  gather.Gather,
  shape.Shape,
  shape.Size,
  shape.ConstantOfShape,
  shape.Range,
  constant.Constant,
  identity.Identity,
  identity.Dropout,
  cast.Cast,
  cast.CastLike,
  reduce.ReduceMean,
  reduce.ReduceSum,
  reduce.ReduceMax,
  reduce.ReduceMin,
  reduce.ReduceL2,
  reduce.ReduceL1,
  reduce.ReduceSumSquare,
  reduce.ReduceProd,
  reduce.ArgMax,
  reduce.ArgMin,
  expand.Expand,
  expand.Tile,
  logic.Where,
  logic.Equal,
  logic.Less,
  logic.Greater,
  logic.LessOrEqual,
  logic.GreaterOrEqual,
  logic.Not,
  logic.And,
  logic.Or,
  logic.Xor,
  variadic.Sum,
  variadic.Max,
  variadic.Min,
  variadic.Mean,
  unary.Round,
  unary.Softsign,
  unary.Sin,
  unary.Cos,
  unary.Tan,
  unary.Asin,
  unary.Acos,
  unary.Atan,
  unary.Sinh,
  unary.Cosh,
  unary.Asinh,
  unary.Acosh,
  unary.Atanh,
  activations.Celu,
  activations.ThresholdedRelu,
  activations.Shrink,
  logic.IsNaN,
  logic.IsInf,
  reduce.ReduceLogSum,
  reduce.ReduceLogSumExp,
  softmax.Hardmax,
  binary.Mod,
  Conv,
  ConvTranspose,
  BatchNormalization,
  InstanceNormalization,
  LayerNormalization,
  GroupNormalization,
  Gemm,
  MatMul,
  pool.MaxPool,
  pool.AveragePool,
  pool.GlobalAveragePool,
  pool.GlobalMaxPool,
  LpPool,
  GlobalLpPool,
  PadV1,
  PadV11,
  resize.Resize10,
  resize.Resize11,
  resize.Upsample7,
  resize.Upsample9,
  If,
  QuantizeLinear,
  DequantizeLinear,
  DynamicQuantizeLinear,
  ConvInteger,
  MatMulInteger,
  QLinearConv,
  QLinearMatMul,
  TopK1,
  TopK10,
  GatherElements,
  GatherND,
  ScatterElements,
  Scatter,
  ScatterND,
  OneHot,
  Trilu,
  NonZero,
  Compress,
  Unique,
  EyeLike,
  DepthToSpace,
  SpaceToDepth,
  LRN,
  MeanVarianceNormalization,
  MaxUnpool,
  ReverseSequence,
  RoiAlign,
  GridSample,
  NonMaxSuppression,
  BitShift,
  Det,
  TfIdfVectorizer,
  LSTM,
  GRU,
  RNN,
  Loop,
  Scan8,
  Scan9,
  Einsum,
  CumSum,
  DFT17,
  DFT20,
  STFT,
  windows.HannWindow,
  windows.HammingWindow,
  windows.BlackmanWindow,
  MelWeightMatrix,
];

const byKey = new Map<string, Kernel[]>();
for (const k of KERNELS) {
  const key = `${k.domain}::${k.op}`;
  const list = byKey.get(key) ?? [];
  list.push(k);
  list.sort((a, b) => b.sinceVersion - a.sinceVersion);
  byKey.set(key, list);
}

export function findKernel(domain: string, op: string, opset: number): Kernel | undefined {
  const d = domain === 'ai.onnx' ? '' : domain;
  return byKey.get(`${d}::${op}`)?.find((k) => k.sinceVersion <= opset);
}

export { RANDOM_OPS, isRandomOp } from './kernel-table.js';

/** Every registered kernel as (domain, op, first opset), for the table survey reads (test/eval/kernel-table.test.ts). */
export function kernelList(): Array<[string, string, number]> {
  return KERNELS.map((k) => [k.domain, k.op, k.sinceVersion]);
}

export function getKernel(domain: string, op: string, opset: number, nodeName: string): Kernel {
  const k = findKernel(domain, op, opset);
  if (!k) {
    if (isRandomOp(domain, op)) {
      throw new PleatError('unsupported-op', `node '${nodeName}': '${op}' draws random numbers, so the whole-model check cannot compare two runs`);
    }
    const dom = domain || 'ai.onnx';
    throw new PleatError('unsupported-op', `node '${nodeName}': operator ${dom}.${op} at opset ${opset} is not supported by pleat's evaluator`);
  }
  return k;
}

export function supportedOps(): string[] {
  return [...new Set(KERNELS.map((k) => (k.domain ? `${k.domain}.` : '') + k.op))].sort();
}
