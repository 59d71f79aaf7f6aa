// Transpose: output axis i is input axis perm[i] (default: the axes reversed).
import { attrInts } from '../../graph/ir.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc, badModel, need, stridesOf } from './common.js';

export function transposeValue(x: Value, perm: number[], ctx: KernelContext): Value {
  const rank = x.dims.length;
  if (perm.length !== rank || new Set(perm).size !== rank || perm.some((p) => p < 0 || p >= rank)) {
    throw badModel(ctx, `perm [${perm}] is not a permutation of ${rank} axes`);
  }
  const dims = perm.map((p) => x.dims[p]!);
  const inStrides = stridesOf(x.dims);
  const st = perm.map((p) => inStrides[p]!); // input stride of each output axis
  const n = x.data.length;
  const out = alloc(x.type, n, ctx);
  if (rank === 0 || n === 0) { out.set(x.data); return { type: x.type, dims, data: out }; }
  const counter = new Array<number>(rank).fill(0);
  const inner = dims[rank - 1]!, sInner = st[rank - 1]!;
  let src = 0;
  for (let o = 0; o < n; o += inner) {
    for (let j = 0; j < inner; j++) out[o + j] = x.data[src + j * sInner]!;
    for (let ax = rank - 2; ax >= 0; ax--) {
      counter[ax]!++;
      src += st[ax]!;
      if (counter[ax]! < dims[ax]!) break;
      src -= st[ax]! * counter[ax]!;
      counter[ax] = 0;
    }
  }
  return { type: x.type, dims, data: out };
}

export const Transpose: Kernel = {
  op: 'Transpose', domain: '', sinceVersion: 1,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const perm = attrInts(ctx.node, 'perm') ?? x.dims.map((_, i) => x.dims.length - 1 - i);
    return [transposeValue(x, perm, ctx)];
  },
};
