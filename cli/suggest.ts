// "Did you mean" for mistyped commands and options: the closest known name by edit distance, offered only when
// it is close enough to be a plausible typo.

/** Levenshtein distance (insert, delete, substitute), plus adjacent swaps counted as one edit. */
export function editDistance(a: string, b: string): number {
  const d: number[][] = Array.from({ length: a.length + 1 }, (_, i) => [i, ...new Array<number>(b.length).fill(0)]);
  for (let j = 1; j <= b.length; j++) d[0]![j] = j;
  for (let i = 1; i <= a.length; i++) {
    for (let j = 1; j <= b.length; j++) {
      const cost = a[i - 1] === b[j - 1] ? 0 : 1;
      let v = Math.min(d[i - 1]![j]! + 1, d[i]![j - 1]! + 1, d[i - 1]![j - 1]! + cost);
      if (i > 1 && j > 1 && a[i - 1] === b[j - 2] && a[i - 2] === b[j - 1]) v = Math.min(v, d[i - 2]![j - 2]! + 1);
      d[i]![j] = v;
    }
  }
  return d[a.length]![b.length]!;
}

/** The nearest candidate within a third of the word's length (at least 1, at most 3 edits), or a prefix match. */
export function nearest(word: string, candidates: readonly string[]): string | undefined {
  let best: string | undefined;
  let bestD = Infinity;
  for (const c of candidates) {
    const dist = editDistance(word, c);
    if (dist < bestD || (dist === bestD && best !== undefined && c < best)) { best = c; bestD = dist; }
  }
  const limit = Math.min(3, Math.max(1, Math.floor(word.length / 3)));
  if (best !== undefined && bestD <= limit) return best;
  const prefixed = candidates.filter((c) => c.startsWith(word) && word.length >= 2);
  return prefixed.length === 1 ? prefixed[0] : undefined;
}
