// BitShift (opset 11): elementwise X << Y or X >> Y (`direction` LEFT or RIGHT) on unsigned integers with
// broadcasting; bits shifted past the type's width are lost (the result wraps to the type, as in C and numpy).
import { attrString } from '../../graph/ir.js';
import { broadcastBinary } from '../broadcast.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need } from './common.js';
import { pairDims } from './binary.js';

const BITS: Record<number, number> = { 2: 8, 4: 16, 12: 32, 13: 64 };

export const BitShift: Kernel = {
  op: 'BitShift', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx), y = need(inputs, 1, ctx);
    const bits = BITS[x.type];
    if (!bits) throw badModel(ctx, `BitShift needs an unsigned integer input, not type ${x.type}`);
    const dir = attrString(ctx.node, 'direction', '');
    if (dir !== 'LEFT' && dir !== 'RIGHT') throw badModel(ctx, `direction '${dir}' must be LEFT or RIGHT`);
    const mask = (1n << BigInt(bits)) - 1n;
    const fn = dir === 'LEFT'
      ? (a: number, s: number) => (s >= bits ? 0 : Number((BigInt(a) << BigInt(s)) & mask))
      : (a: number, s: number) => (s >= bits ? 0 : Number(BigInt(a) >> BigInt(s)));
    const { bDims, dims } = pairDims(x, y, ctx);
    const out = alloc(x.type, dims.reduce((p, q) => p * q, 1), ctx);
    broadcastBinary(x.data, x.dims, y.data, bDims, fn, out, dims);
    return [{ type: x.type, dims, data: out }];
  },
};
