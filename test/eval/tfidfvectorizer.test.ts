// TfIdfVectorizer. Outside check: onnxruntime-node (graph optimizations off) on seeded random token rows, pools
// of 1- and 2-grams, gram length ranges, skip counts and every mode.
import { describe, it } from 'vitest';
import { fs } from '../helpers/build.js';
import { SEEDS, T, randInt, rng, vsOrt } from './ort-compare.js';

describe('TfIdfVectorizer (outside check: onnxruntime-node)', () => {
  it('1-D and 2-D input, TF/IDF/TFIDF, skips 0-2', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const uni = [...new Set(randInt(r, 4, 0, 6))];
      const bi: number[] = [];
      const seen = new Set<string>();
      for (let t = 0; t < 4; t++) {
        const g = randInt(r, 2, 0, 6);
        if (!seen.has(g.join())) { seen.add(g.join()); bi.push(...g); }
      }
      const count = uni.length + bi.length / 2;
      const indexes = Array.from({ length: count }, (_, i) => i);
      for (let i = count - 1; i > 0; i--) { const j = Math.floor(r() * (i + 1)); [indexes[i], indexes[j]] = [indexes[j]!, indexes[i]!]; }
      const rows = r() < 0.5 ? [] : [1 + Math.floor(r() * 3)];
      const C = 3 + Math.floor(r() * 8);
      const dims = [...rows, C];
      const x = { name: 'x', dims, data: randInt(r, dims.reduce((a, b) => a * b, 1), 0, 6), type: T.INT64 };
      for (const mode of ['TF', 'IDF', 'TFIDF']) {
        const attrs = {
          mode, min_gram_length: 1 + Math.floor(r() * 2), max_gram_length: 2, max_skip_count: Math.floor(r() * 3),
          ngram_counts: [0, uni.length], ngram_indexes: indexes, pool_int64s: [...uni, ...bi],
          ...(mode === 'TF' ? {} : { weights: fs(Array.from({ length: count }, () => 0.5 + r())) }),
        };
        await vsOrt('TfIdfVectorizer', 9, [x], attrs);
      }
    }
  });
});
