// ConvTranspose (all opsets): per group, col = W_g^T * X_g by GEMM, then col2im scatters col into the output
// (the adjoint of Conv's im2col). Output size and pads follow the operator docs:
//   out = s*(in-1) + output_padding + ((k-1)*d+1) - pad_begin - pad_end
// and with output_shape (or SAME_*) total_padding = s*(in-1) + output_padding + ((k-1)*d+1) - out, split
// with the extra one at the end for SAME_UPPER and at the beginning otherwise.
import { checkAllocation } from '../budget.js';
import { attrInt, attrInts, attrString, elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, intsOr, need, unsupported } from '../attrs.js';
import { gemm, rowMajor } from '../gemm.js';
import { col2im } from '../im2col.js';
import { geometry3 } from './conv.js';
import type { Kernel, KernelContext, Value } from '../value.js';

let colBuf = new Float64Array(0);

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const X = need(inputs, 0, ctx, 'X'), W = need(inputs, 1, ctx, 'W'), B = inputs[2];
  const rank = X.dims.length;
  if (rank < 3 || rank > 5) throw badModel(ctx, `input X has rank ${rank}; ConvTranspose needs N x C x 1 to 3 spatial axes`);
  if (W.dims.length !== rank) throw badModel(ctx, `weight W has rank ${W.dims.length}, input X has rank ${rank}`);
  const [N, C] = X.dims as [number, number];
  const group = attrInt(ctx.node, 'group', 1);
  if (W.dims[0] !== C || group < 1 || C % group !== 0) throw badModel(ctx, `W [${W.dims.join(',')}] does not fit X with ${C} channels and group ${group}`);
  const Cg = C / group, Mg = W.dims[1]!, M = Mg * group;
  const r = rank - 2;
  const kernel = attrInts(ctx.node, 'kernel_shape') ?? W.dims.slice(2);
  for (let i = 0; i < r; i++) if (kernel[i] !== W.dims[2 + i]) throw badModel(ctx, `kernel_shape [${kernel.join(',')}] does not match W dims [${W.dims.join(',')}]`);
  if (B && (B.dims.length !== 1 || B.dims[0] !== M)) throw badModel(ctx, `bias has dims [${B.dims.join(',')}], expected [${M}]`);
  const strides = intsOr(ctx, 'strides', new Array(r).fill(1), r);
  const dilations = intsOr(ctx, 'dilations', new Array(r).fill(1), r);
  const outPad = intsOr(ctx, 'output_padding', new Array(r).fill(0), r);
  const pads = intsOr(ctx, 'pads', new Array(2 * r).fill(0), 2 * r);
  const autoPad = attrString(ctx.node, 'auto_pad', 'NOTSET');
  if (!['NOTSET', '', 'SAME_UPPER', 'SAME_LOWER', 'VALID'].includes(autoPad)) throw unsupported(ctx, `auto_pad '${autoPad}'`);
  let outShape = attrInts(ctx.node, 'output_shape');
  if (outShape && outShape.length === r + 2) outShape = outShape.slice(2);
  if (outShape && outShape.length !== r) throw badModel(ctx, `output_shape has ${outShape.length} values for ${r} spatial axes`);
  const inSp = X.dims.slice(2);
  const padBegin = pads.slice(0, r), padEnd = pads.slice(r), outSp: number[] = [];
  for (let i = 0; i < r; i++) {
    const dk = (kernel[i]! - 1) * dilations[i]! + 1;
    const full = strides[i]! * (inSp[i]! - 1) + outPad[i]! + dk;
    const target = outShape ? outShape[i]! : autoPad.startsWith('SAME') ? inSp[i]! * strides[i]! : undefined;
    if (target !== undefined) {
      // a target beyond the full size pads nothing (as onnxruntime does): SAME_* then gives the full size,
      // an explicit output_shape gets bias-only positions at the end
      const total = Math.max(0, full - target);
      const half = Math.floor(total / 2);
      padBegin[i] = autoPad === 'SAME_UPPER' ? half : total - half;
      padEnd[i] = total - padBegin[i]!;
      outSp.push(outShape ? target : full - total);
    } else {
      if (autoPad === 'VALID') { padBegin[i] = 0; padEnd[i] = 0; }
      outSp.push(full - padBegin[i]! - padEnd[i]!);
    }
    if (outSp[i]! < 1) throw badModel(ctx, `output spatial size ${outSp[i]} is not positive`);
  }
  const inVol = elementCount(inSp), outVol = elementCount(outSp), kVol = elementCount(kernel);
  // col2im treats the ConvTranspose output as the "image" and the input grid as the window positions
  const g3 = geometry3(outSp, inSp, kernel, strides, dilations, padBegin);
  const rows = Mg * kVol;
  checkAllocation(rows * inVol + Mg * outVol, 8); // scratch and accumulator, before the output itself
  if (colBuf.length < rows * inVol) colBuf = new Float64Array(rows * inVol);
  const col = colBuf;
  const acc = new Float64Array(Mg * outVol);
  const Y = allocFloat(N * M * outVol, ctx.precision);
  for (let n = 0; n < N; n++) {
    for (let gi = 0; gi < group; gi++) {
      // W_g is [Cg, Mg*k] row-major; its transpose is read through strides
      const A = { data: W.data, off: gi * Cg * rows, rs: 1, cs: rows };
      gemm(rows, inVol, Cg, A, rowMajor(X.data, (n * C + gi * Cg) * inVol, inVol), col, 0, inVol, false);
      if (B) for (let m = 0; m < Mg; m++) acc.fill(B.data[gi * Mg + m]!, m * outVol, (m + 1) * outVol);
      else acc.fill(0);
      col2im(col, Mg, g3, acc, 0);
      Y.set(acc, (n * M + gi * Mg) * outVol);
    }
  }
  return [{ type: X.type, dims: [N, M, ...outSp], data: Y }];
}

export const ConvTranspose: Kernel = { op: 'ConvTranspose', domain: '', sinceVersion: 1, run };
