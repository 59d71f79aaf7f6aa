// Einsum against onnxruntime-node (graph optimizations off) on seeded random equations: repeated labels within
// a term (diagonals), ellipsis with broadcasting, implicit and explicit outputs, one to three operands, float
// and int32. Semantics: ONNX operator docs (Einsum) and numpy.einsum; the fixed cases test_einsum_* of the
// ONNX backend data (onnx 1.12.0) run in conformance.test.ts.
import { describe, it } from 'vitest';
import { count, randn, rng, T, vsOrt, type In } from './ort-compare.js';

interface Eq { equation: string; dims: number[][] }

function randomEquation(seed: number, o: { ellipsis?: boolean; repeat?: boolean; implicit?: boolean }): Eq {
  const r = rng(seed);
  // onnxruntime 1.30 fails on an upper-case label in an implicit output, so implicit cases use lower case only
  const pool = (o.implicit ? 'abcde' : 'abcdeA').split('');
  const size = new Map(pool.map((l) => [l, 1 + Math.floor(r() * 3)]));
  const nOps = 1 + Math.floor(r() * 3);
  const ellRank = o.ellipsis ? 1 + Math.floor(r() * 2) : 0;
  const ellSizes = Array.from({ length: ellRank }, () => 2 + Math.floor(r() * 2));
  const terms: string[] = [];
  const dims: number[][] = [];
  const used = new Set<string>();
  for (let k = 0; k < nOps; k++) {
    // onnxruntime refuses an empty term in the implicit form, so there every term has a label
    const rank = Math.floor(r() * 3) + (k === 0 || o.implicit ? 1 : 0);
    const labels: string[] = [];
    for (let i = 0; i < rank; i++) labels.push(pool[Math.floor(r() * pool.length)]!);
    if (o.repeat && k === 0 && labels.length > 0) labels.push(labels[0]!);
    labels.forEach((l) => used.add(l));
    const hasEll = o.ellipsis && (k === 0 || r() < 0.6);
    // this operand's broadcast axes: a right-aligned suffix of the ellipsis axes, some of size 1
    // the ONNX standard's shape inference wants every ellipsis to cover the same number of axes; some are size 1
    const myEll = hasEll ? ellSizes.map((d) => (k > 0 && r() < 0.3 ? 1 : d)) : [];
    const at = Math.floor(r() * (labels.length + 1));
    terms.push(hasEll ? [...labels.slice(0, at), '...', ...labels.slice(at)].join('') : labels.join(''));
    dims.push([...labels.slice(0, at).map((l) => size.get(l)!), ...(hasEll ? myEll : []), ...labels.slice(hasEll ? at : labels.length).map((l) => size.get(l)!)]);
    if (!hasEll) dims[k] = labels.map((l) => size.get(l)!);
  }
  if (o.implicit) return { equation: terms.join(','), dims };
  const outLabels = [...used].filter(() => r() < 0.6).sort(() => r() - 0.5);
  const out = o.ellipsis ? (r() < 0.5 ? ['...', ...outLabels] : [...outLabels, '...']) : outLabels;
  return { equation: `${terms.join(',')}->${out.join('')}`, dims };
}

async function check(eq: Eq, seed: number, type: number = T.FLOAT): Promise<void> {
  const r = rng(seed + 1000);
  const ins: In[] = eq.dims.map((d, k) => ({
    name: `x${k}`, dims: d, type,
    data: type === T.FLOAT ? randn(r, count(d)) : Array.from({ length: count(d) }, () => Math.floor(r() * 7) - 3),
  }));
  await vsOrt('Einsum', 12, ins, { equation: eq.equation }, [{ name: 'y', type }], 1e-5);
}

describe('Einsum vs onnxruntime-node', () => {
  it('repeated indices (diagonals) with explicit outputs (seeded)', async () => {
    for (let seed = 1; seed <= 12; seed++) await check(randomEquation(seed, { repeat: true }), seed);
  });
  it('ellipsis with broadcasting (seeded)', async () => {
    for (let seed = 21; seed <= 32; seed++) await check(randomEquation(seed, { ellipsis: true }), seed);
  });
  it('implicit outputs, with and without ellipsis and repeated indices (seeded)', async () => {
    for (let seed = 41; seed <= 52; seed++) await check(randomEquation(seed, { implicit: true, ellipsis: seed % 2 === 0, repeat: seed % 3 === 0 }), seed);
  });
  it('common forms: batched matmul, attention scores, bilinear, trace, outer product; int32', async () => {
    const cases: Eq[] = [
      { equation: 'bij,bjk->bik', dims: [[2, 3, 4], [2, 4, 5]] },
      { equation: 'bhid,bhjd->bhij', dims: [[1, 2, 3, 4], [1, 2, 5, 4]] },
      { equation: '...ij,...jk', dims: [[2, 1, 3, 4], [1, 3, 4, 2]] },
      { equation: 'ik,jkl,il->ij', dims: [[2, 3], [4, 3, 5], [2, 5]] },
      { equation: 'ii', dims: [[4, 4]] },
      { equation: 'i,j->ij', dims: [[3], [4]] },
      { equation: 'bii->bi', dims: [[2, 3, 3]] },
      { equation: 'i,i', dims: [[5], [5]] },
      { equation: 'ij->', dims: [[3, 4]] },
      { equation: ',ij->ij', dims: [[], [2, 3]] },
      { equation: 'ij,jk,kl->il', dims: [[2, 3], [3, 4], [4, 2]] },
    ];
    let seed = 60;
    for (const eq of cases) await check(eq, seed++);
    for (const eq of cases) await check(eq, seed++, T.INT32);
  });
});
