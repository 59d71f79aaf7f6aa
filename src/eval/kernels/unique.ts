// Unique (opset 11): the distinct elements (or, with `axis`, the distinct slices along it) of X, sorted
// ascending (sorted=1, the default; slices compare lexicographically in row-major order, as numpy.unique does)
// or in order of first occurrence (sorted=0), with four outputs: Y, the index of each one's first occurrence
// in X, the inverse indices (for each element or slice of X, its position in Y) and the counts (int64).
import { DataType, attrInt } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, elementCount, need, normAxis } from './common.js';

export const Unique: Kernel = {
  op: 'Unique', domain: '', sinceVersion: 11,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const a = attrInt(ctx.node, 'axis');
    const sorted = attrInt(ctx.node, 'sorted', 1) !== 0;
    const dims = a === undefined ? [x.data.length] : x.dims;
    const axis = a === undefined ? 0 : normAxis(a, dims.length, ctx);
    const len = dims[axis]!;
    const outer = elementCount(dims.slice(0, axis)), inner = elementCount(dims.slice(axis + 1));
    const width = outer * inner;
    // slice s as a row of `width` numbers in row-major order of the other axes
    const rows: Float64Array[] = [];
    for (let s = 0; s < len; s++) {
      const row = new Float64Array(width);
      for (let o = 0; o < outer; o++) for (let i = 0; i < inner; i++) row[o * inner + i] = x.data[(o * len + s) * inner + i]!;
      rows.push(row);
    }
    const cmp = (p: Float64Array, q: Float64Array) => {
      for (let k = 0; k < width; k++) if (p[k] !== q[k]) return p[k]! < q[k]! ? -1 : 1;
      return 0;
    };
    // first occurrences, in order of appearance, keyed by the row's contents
    const seen = new Map<string, number>();
    const firsts: number[] = [];
    const groupOf = new Array<number>(len);
    const counts: number[] = [];
    for (let s = 0; s < len; s++) {
      const key = Array.from(rows[s]!).join(',');
      let g = seen.get(key);
      if (g === undefined) { g = firsts.length; seen.set(key, g); firsts.push(s); counts.push(0); }
      groupOf[s] = g;
      counts[g]!++;
    }
    const order = firsts.map((_, g) => g);
    if (sorted) order.sort((g, h) => cmp(rows[firsts[g]!]!, rows[firsts[h]!]!));
    const rank = new Array<number>(order.length);
    order.forEach((g, pos) => { rank[g] = pos; });
    const u = order.length;
    const yDims = [...dims];
    yDims[axis] = u;
    const y = alloc(x.type, outer * u * inner, ctx, false);
    order.forEach((g, pos) => {
      const row = rows[firsts[g]!]!;
      for (let o = 0; o < outer; o++) for (let i = 0; i < inner; i++) y[(o * u + pos) * inner + i] = row[o * inner + i]!;
    });
    const int = (vals: number[]) => {
      const d = alloc(DataType.INT64, vals.length, ctx, false);
      d.set(vals);
      return { type: DataType.INT64, dims: [vals.length], data: d };
    };
    return [
      { type: x.type, dims: yDims, data: y },
      int(order.map((g) => firsts[g]!)),
      int(groupOf.map((g) => rank[g]!)),
      int(order.map((g) => counts[g]!)),
    ];
  },
};
