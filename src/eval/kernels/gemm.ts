// Gemm (opsets 1-13): Y = alpha * A' * B' + beta * C, A' = transA ? A^T : A, B' likewise; C (optional from
// opset 11) broadcasts to [M, N]. The product runs in the shared blocked GEMM.
import { attrFloat, attrInt } from '../../graph/ir.js';
import { allocFloat, badModel, need } from '../attrs.js';
import { broadcastIndex, broadcastShape } from '../broadcast.js';
import { gemm } from '../gemm.js';
import type { Kernel, KernelContext, Value } from '../value.js';

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const A = need(inputs, 0, ctx, 'A'), B = need(inputs, 1, ctx, 'B');
  const C = ctx.opset < 11 ? need(inputs, 2, ctx, 'C') : inputs[2];
  if (A.dims.length !== 2 || B.dims.length !== 2) throw badModel(ctx, `A [${A.dims.join(',')}] and B [${B.dims.join(',')}] must both be 2-D`);
  const tA = attrInt(ctx.node, 'transA', 0) !== 0, tB = attrInt(ctx.node, 'transB', 0) !== 0;
  const alpha = attrFloat(ctx.node, 'alpha', 1), beta = attrFloat(ctx.node, 'beta', 1);
  const M = tA ? A.dims[1]! : A.dims[0]!, K = tA ? A.dims[0]! : A.dims[1]!;
  const Kb = tB ? B.dims[1]! : B.dims[0]!, N = tB ? B.dims[0]! : B.dims[1]!;
  if (K !== Kb) throw badModel(ctx, `inner dimensions differ: A' is ${M}x${K}, B' is ${Kb}x${N}`);
  const acc = new Float64Array(M * N);
  const a = tA ? { data: A.data, off: 0, rs: 1, cs: M } : { data: A.data, off: 0, rs: K, cs: 1 };
  const b = tB ? { data: B.data, off: 0, rs: 1, cs: K } : { data: B.data, off: 0, rs: N, cs: 1 };
  gemm(M, N, K, a, b, acc, 0, N, false);
  const Y = allocFloat(M * N, ctx.precision, false);
  if (C && beta !== 0) {
    const out = [M, N];
    const bd = broadcastShape([out, C.dims], `node '${ctx.node.name}' (Gemm)`);
    if (bd.length !== 2 || bd[0] !== M || bd[1] !== N) throw badModel(ctx, `C [${C.dims.join(',')}] does not broadcast to [${M},${N}]`);
    const ci = broadcastIndex(C.dims, out), c = C.data;
    for (let i = 0; i < M * N; i++) Y[i] = alpha * acc[i]! + beta * c[ci[i]!]!;
  } else {
    for (let i = 0; i < M * N; i++) Y[i] = alpha * acc[i]!;
  }
  return [{ type: A.type, dims: [M, N], data: Y }];
}

export const Gemm: Kernel = { op: 'Gemm', domain: '', sinceVersion: 1, run };
