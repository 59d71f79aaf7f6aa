// Expand (broadcast an input to a shape, both ways as numpy does) and Tile (repeat along every axis).
import { broadcastShape, expandTo } from '../broadcast.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, elementCount, intList, need, stridesOf } from './common.js';

export const Expand: Kernel = {
  op: 'Expand', domain: '', sinceVersion: 8,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const shape = intList(need(inputs, 1, ctx));
    const dims = broadcastShape([x.dims, shape], `node '${ctx.node.name}' (Expand)`);
    const out = alloc(x.type, elementCount(dims), ctx);
    expandTo(x.data, x.dims, out, dims);
    return [{ type: x.type, dims, data: out }];
  },
};

export const Tile: Kernel = {
  op: 'Tile', domain: '', sinceVersion: 6,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const repeats = intList(need(inputs, 1, ctx));
    const rank = x.dims.length;
    if (repeats.length !== rank || repeats.some((r) => r < 0)) throw badModel(ctx, `repeats [${repeats}] do not fit rank ${rank}`);
    const dims = x.dims.map((d, i) => d * repeats[i]!);
    const n = elementCount(dims);
    const out = alloc(x.type, n, ctx);
    const inStrides = stridesOf(x.dims);
    const counter = new Array<number>(rank).fill(0);
    for (let o = 0; o < n; o++) {
      let src = 0;
      for (let a = 0; a < rank; a++) src += (counter[a]! % x.dims[a]!) * inStrides[a]!;
      out[o] = x.data[src]!;
      for (let a = rank - 1; a >= 0; a--) {
        if (++counter[a]! < dims[a]!) break;
        counter[a] = 0;
      }
    }
    return [{ type: x.type, dims, data: out }];
  },
};
