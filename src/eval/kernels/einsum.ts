// Einsum (opset 12), ONNX operator docs: "term1, term2 -> output", one term per input. A label repeated within
// a term takes that term's diagonal; labels missing from the output are summed over; "..." stands for
// broadcast axes (aligned from the right across terms, numpy rules). Without "->" (implicit form) the output
// is the ellipsis axes followed by the labels that appear exactly once, in ASCII order (as numpy.einsum does).
import { attrString } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { Kernel, KernelContext, NumArray, Value } from '../value.js';
import { alloc, elementCount, isIntegerType, wrapAll } from './common.js';
import { checkSteps } from '../limits.js';

/** Parsed term: letter labels, and where the ellipsis sits (index into labels) if any. */
interface Term { labels: string[]; ellipsisAt: number }

function parseTerm(t: string, ctx: KernelContext): Term {
  const labels: string[] = [];
  let ellipsisAt = -1;
  for (let i = 0; i < t.length; i++) {
    if (t.startsWith('...', i)) {
      if (ellipsisAt >= 0) throw badModel(ctx, `term '${t}' has two ellipses`);
      ellipsisAt = labels.length;
      i += 2;
    } else if (/[a-zA-Z]/.test(t[i]!)) labels.push(t[i]!);
    else throw badModel(ctx, `term '${t}' holds '${t[i]}', which is not a letter or an ellipsis`);
  }
  return { labels, ellipsisAt };
}

/** Expand a term's ellipsis into broadcast labels '0'..'E-1' (right-aligned to the global ellipsis rank E). */
function expand(term: Term, ellRank: number, globalE: number): string[] {
  if (term.ellipsisAt < 0) return term.labels;
  const ell = Array.from({ length: ellRank }, (_, j) => String(globalE - ellRank + j));
  return [...term.labels.slice(0, term.ellipsisAt), ...ell, ...term.labels.slice(term.ellipsisAt)];
}

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const eq = attrString(ctx.node, 'equation');
  if (eq === undefined) throw badModel(ctx, 'attribute equation is missing');
  const ops = inputs.map((v, i) => { if (!v) throw badModel(ctx, `input ${i} is missing`); return v; });
  const clean = eq.replace(/\s+/g, '');
  const arrow = clean.indexOf('->');
  const lhs = arrow >= 0 ? clean.slice(0, arrow) : clean;
  const terms = lhs.split(',').map((t) => parseTerm(t, ctx));
  if (terms.length !== ops.length) throw badModel(ctx, `equation '${eq}' has ${terms.length} terms for ${ops.length} inputs`);

  // ellipsis ranks per operand, and the broadcast ellipsis rank
  const ellRanks = terms.map((t, k) => {
    const r = ops[k]!.dims.length - t.labels.length;
    if (t.ellipsisAt < 0 ? r !== 0 : r < 0) throw badModel(ctx, `term ${k} '${lhs.split(',')[k]}' does not match input rank ${ops[k]!.dims.length}`);
    return t.ellipsisAt < 0 ? 0 : r;
  });
  const E = Math.max(0, ...ellRanks);
  const full = terms.map((t, k) => expand(t, ellRanks[k]!, E));

  // size of every label (letters must agree; ellipsis axes broadcast)
  const size = new Map<string, number>();
  full.forEach((labels, k) => labels.forEach((l, ax) => {
    const d = ops[k]!.dims[ax]!, have = size.get(l);
    if (have === undefined || have === 1) size.set(l, d);
    else if (d !== have && !(d === 1 && /\d/.test(l))) throw badModel(ctx, `label '${/\d/.test(l) ? '...' : l}' has sizes ${have} and ${d}`);
  }));

  let out: string[];
  const ellLabels = Array.from({ length: E }, (_, j) => String(j));
  if (arrow >= 0) {
    const o = parseTerm(clean.slice(arrow + 2), ctx);
    if (new Set(o.labels).size !== o.labels.length) throw badModel(ctx, `output term of '${eq}' repeats a label`);
    for (const l of o.labels) if (!size.has(l)) throw badModel(ctx, `output label '${l}' appears in no input term`);
    // an explicit output without "..." sums the broadcast axes, as numpy.einsum does
    out = o.ellipsisAt < 0 ? o.labels : [...o.labels.slice(0, o.ellipsisAt), ...ellLabels, ...o.labels.slice(o.ellipsisAt)];
  } else {
    const count = new Map<string, number>();
    for (const t of terms) for (const l of t.labels) count.set(l, (count.get(l) ?? 0) + 1);
    const once = [...count].filter(([, n]) => n === 1).map(([l]) => l).sort();
    out = [...ellLabels, ...once];
  }
  const summed = [...size.keys()].filter((l) => !out.includes(l));
  const order = [...out, ...summed];
  const dims = order.map((l) => size.get(l)!);
  const outDims = out.map((l) => size.get(l)!);

  // per operand, the stride of each label in `order` (summed over repeated axes: the diagonal; 0 when broadcast)
  const strides = ops.map((v, k) => {
    const s = new Array<number>(order.length).fill(0);
    let acc = 1;
    const st = new Array<number>(v.dims.length);
    for (let ax = v.dims.length - 1; ax >= 0; ax--) { st[ax] = acc; acc *= v.dims[ax]!; }
    full[k]!.forEach((l, ax) => { if (v.dims[ax] !== 1 || size.get(l) === 1) s[order.indexOf(l)]! += st[ax]!; });
    return s;
  });

  const type = ops[0]!.type;
  const nOut = elementCount(outDims);
  const y = alloc(type, nOut, ctx);
  const total = elementCount(dims);
  checkSteps(ctx, total * ops.length, `equation '${eq}'`);
  if (total > 0) contract(ops.map((v) => v.data), strides, dims, summed.length > 0, elementCount(dims.slice(out.length)), y);
  if (isIntegerType(type)) wrapAll(type, y);
  return [{ type, dims: outDims, data: y }];
}

/**
 * Walk every combination of the labels (output labels first, last label fastest) and add the operands'
 * products into y. The last label runs as a tight inner loop; the others advance as an odometer. `summing`:
 * the last label is summed over (so `perOutput` consecutive products make one output element); otherwise each
 * product is its own output element.
 */
function contract(datas: NumArray[], strides: number[][], dims: number[], summing: boolean, perOutput: number, y: NumArray): void {
  const R = dims.length, K = datas.length;
  if (R === 0) { let p = 1; for (const d of datas) p *= d[0]!; y[0] = p; return; } // scalars only
  const L = dims[R - 1]!;
  const idx = new Array<number>(R - 1).fill(0);
  const off = new Array<number>(K).fill(0);
  const last = strides.map((s) => s[R - 1]!);
  const outer = elementCount(dims.slice(0, R - 1));
  const a = datas[0]!, b = datas[1], sa = last[0]!, sb = last[1] ?? 0;
  let acc = 0, n = 0, o = 0;
  for (let it = 0; it < outer; it++) {
    if (summing) {
      let part = 0;
      if (K === 1) { let p = off[0]!; for (let i = 0; i < L; i++, p += sa) part += a[p]!; }
      else if (K === 2) { let p = off[0]!, q = off[1]!; for (let i = 0; i < L; i++, p += sa, q += sb) part += a[p]! * b![q]!; }
      else for (let i = 0; i < L; i++) { let prod = 1; for (let k = 0; k < K; k++) prod *= datas[k]![off[k]! + i * last[k]!]!; part += prod; }
      acc += part;
      n += L;
      if (n === perOutput) { y[o++] = acc; acc = 0; n = 0; }
    } else {
      for (let i = 0; i < L; i++) { let prod = 1; for (let k = 0; k < K; k++) prod *= datas[k]![off[k]! + i * last[k]!]!; y[o++] = prod; }
    }
    // odometer step over the other labels
    for (let ax = R - 2; ax >= 0; ax--) {
      if (++idx[ax]! < dims[ax]!) { for (let k = 0; k < K; k++) off[k]! += strides[k]![ax]!; break; }
      for (let k = 0; k < K; k++) off[k]! -= strides[k]![ax]! * (dims[ax]! - 1);
      idx[ax] = 0;
    }
  }
}

export const Einsum: Kernel = { op: 'Einsum', domain: '', sinceVersion: 12, run };
