// TfIdfVectorizer (opset 9), for integer input (string pools are refused: the evaluator holds numeric tensors).
// For each row of X (shape [C] or [N, C]) it counts the n-grams of the pool (pool_int64s: the 1-grams from
// ngram_counts[0], the 2-grams from ngram_counts[1], ...) of length min_gram_length..max_gram_length, whose
// items are skip + 1 apart for skip = 0..max_skip_count (a 1-gram is counted once), into the output column
// ngram_indexes[k] of the k-th pool n-gram. mode TF gives the counts, IDF weights[k] (default 1) where the count
// is non-zero, TFIDF count * weights[k] (ONNX TfIdfVectorizer docs).
import { DataType, attrFloats, attrInt, attrInts, attrString } from '../../graph/ir.js';
import type { Kernel } from '../value.js';
import { alloc, badModel, need, unsupported } from './common.js';

export const TfIdfVectorizer: Kernel = {
  op: 'TfIdfVectorizer', domain: '', sinceVersion: 9,
  run(inputs, ctx) {
    const x = need(inputs, 0, ctx);
    const pool = attrInts(ctx.node, 'pool_int64s');
    if (!pool) throw unsupported(ctx, 'a string pool (pool_strings)');
    const minN = attrInt(ctx.node, 'min_gram_length', 1), maxN = attrInt(ctx.node, 'max_gram_length', 1);
    const maxSkip = attrInt(ctx.node, 'max_skip_count', 0);
    const mode = attrString(ctx.node, 'mode', 'TF');
    if (mode !== 'TF' && mode !== 'IDF' && mode !== 'TFIDF') throw unsupported(ctx, `mode '${mode}'`);
    const starts = attrInts(ctx.node, 'ngram_counts') ?? [0];
    const indexes = attrInts(ctx.node, 'ngram_indexes') ?? [];
    const weights = attrFloats(ctx.node, 'weights');
    // pool n-gram -> k (its position among the pool's n-grams)
    const gramOf = new Map<string, number>();
    let k = 0;
    for (let g = 0; g < starts.length; g++) {
      const n = g + 1, from = starts[g]!, to = g + 1 < starts.length ? starts[g + 1]! : pool.length;
      if ((to - from) % n !== 0) throw badModel(ctx, `the ${n}-grams of the pool (${to - from} values) do not split into ${n}s`);
      for (let p = from; p < to; p += n) gramOf.set(`${n}:${pool.slice(p, p + n).join(',')}`, k++);
    }
    if (indexes.length !== k) throw badModel(ctx, `ngram_indexes has ${indexes.length} entries for ${k} pool n-grams`);
    const width = indexes.length ? Math.max(...indexes) + 1 : 0;
    const rows = x.dims.length === 2 ? x.dims[0]! : 1, C = x.dims[x.dims.length - 1] ?? 1;
    if (x.dims.length > 2) throw badModel(ctx, `input has rank ${x.dims.length}; expected [C] or [N, C]`);
    const out = alloc(DataType.FLOAT, rows * width, ctx);
    for (let r = 0; r < rows; r++) {
      const counts = new Float64Array(k);
      for (let n = Math.max(1, minN); n <= maxN; n++) {
        for (let skip = 0; skip <= (n === 1 ? 0 : maxSkip); skip++) {
          const step = skip + 1;
          for (let i = 0; i + (n - 1) * step < C; i++) {
            const items: number[] = [];
            for (let j = 0; j < n; j++) items.push(x.data[r * C + i + j * step]!);
            const g = gramOf.get(`${n}:${items.join(',')}`);
            if (g !== undefined) counts[g]!++;
          }
        }
      }
      for (let g = 0; g < k; g++) {
        const c = counts[g]!, w = weights ? weights[g]! : 1;
        const v = mode === 'TF' ? c : mode === 'IDF' ? (c > 0 ? w : 0) : c * w;
        out[r * width + indexes[g]!] = v;
      }
    }
    return [{ type: DataType.FLOAT, dims: x.dims.length === 2 ? [rows, width] : [width], data: out }];
  },
};
