// MatMul (opsets 1-13), numpy matmul semantics: 1-D operands are promoted to a row (A) or column (B) and the
// promoted axis dropped from the result; leading batch axes broadcast. Each batch is one blocked GEMM; when B
// has no batch axes the batches of A are stacked into one taller GEMM.
import { elementCount } from '../../graph/ir.js';
import { allocFloat, badModel, need } from '../attrs.js';
import { broadcastIndex, broadcastShape } from '../broadcast.js';
import { gemm, rowMajor } from '../gemm.js';
import type { Kernel, KernelContext, Value } from '../value.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const A = need(inputs, 0, ctx, 'A'), B = need(inputs, 1, ctx, 'B');
  if (A.dims.length === 0 || B.dims.length === 0) throw badModel(ctx, 'MatMul operands must have rank >= 1');
  const aD = A.dims.length === 1 ? [1, A.dims[0]!] : A.dims;
  const bD = B.dims.length === 1 ? [B.dims[0]!, 1] : B.dims;
  const M = aD[aD.length - 2]!, K = aD[aD.length - 1]!, Kb = bD[bD.length - 2]!, N = bD[bD.length - 1]!;
  if (K !== Kb) throw badModel(ctx, `inner dimensions differ: A [${A.dims.join(',')}], B [${B.dims.join(',')}]`);
  const aBatch = aD.slice(0, -2), bBatch = bD.slice(0, -2);
  const batch = broadcastShape([aBatch, bBatch], `node '${ctx.node.name}' (MatMul)`);
  const nb = elementCount(batch);
  const Y = allocFloat(nb * M * N, ctx.precision, false);
  if (elementCount(bBatch) === 1 && elementCount(aBatch) === nb) {
    gemm(nb * M, N, K, rowMajor(A.data, 0, K), rowMajor(B.data, 0, N), Y, 0, N, false);
  } else {
    const ai = broadcastIndex(aBatch, batch), bi = broadcastIndex(bBatch, batch);
    for (let t = 0; t < nb; t++) {
      gemm(M, N, K, rowMajor(A.data, ai[t]! * M * K, K), rowMajor(B.data, bi[t]! * K * N, N), Y, t * M * N, N, false);
    }
  }
  const dims = [...batch];
  if (A.dims.length > 1) dims.push(M);
  if (B.dims.length > 1) dims.push(N);
  return [{ type: A.type, dims, data: Y }];
}

export const MatMul: Kernel = { op: 'MatMul', domain: '', sinceVersion: 1, run };
