// Seeded random models for the fold engine's equivalence tests: chains and branches of Conv, ConvTranspose,
// Gemm and MatMul layers with BatchNormalization, LayerNormalization and constant Mul/Add/Sub/Div steps
// between them, fan-out (several readers of one value), weights and statistics shared by several nodes,
// Constant-node parameters, model outputs taken mid-chain, unnamed nodes, If bodies reading outer values and
// weights, and IR version 3 (initializers listed as inputs). Invented data: the values only need to be finite
// and the graphs valid; what the tests compare is what the engine makes of them. Same seed, same model.
import { GraphBuilder, f, modelBytes, randn, rng } from '../helpers/build.js';
import type { FoldOptions } from '../../src/fold/index.js';

type Rand = () => number;
const pick = <T>(r: Rand, xs: readonly T[]): T => xs[Math.floor(r() * xs.length)]!;
const int = (r: Rand, lo: number, hi: number) => lo + Math.floor(r() * (hi - lo + 1));

interface Val { name: string; rank: 4 | 2; ch: number }

export interface RandomCase {
  bytes: Uint8Array;
  options: FoldOptions;
  /** Fail the proof of every fold whose target's name hashes to 0 mod 3 (exercises the undo path). */
  failSomeProofs: boolean;
}

/** A random model and fold options for `seed`. */
export function randomCase(seed: number): RandomCase {
  const r = rng(seed * 7919 + 13);
  const g = new GraphBuilder('rand');
  const irVersion = r() < 0.1 ? 3 : 8;
  const opset = r() < 0.15 ? 13 : 17;
  const vals: Val[] = [];
  const weights = new Map<string, string[]>(); // dims key -> weight names (for sharing)
  const params: string[][] = []; // BN parameter sets (for sharing)
  let k = 0;
  const nm = (base: string) => (r() < 0.12 ? '' : `${base}${k++}`);
  const uniq = (base: string) => `${base}${k++}`;
  const node = (op: string, ins: string[], attrs: Record<string, unknown> = {}, name = nm(op.toLowerCase()), outs?: string[]) => {
    const out = outs ?? [uniq(`${op.toLowerCase()}_o`)];
    g.node(op, ins, attrs as never, { name, outputs: out });
    return out[0]!;
  };
  const constOrInit = (name: string, dims: number[], values: Float32Array) => (r() < 0.12 ? g.constant(name, dims, values) : g.init(name, dims, values));
  const weight = (dims: number[], scale = 0.6) => {
    const key = dims.join('x');
    const have = weights.get(key) ?? [];
    if (have.length && r() < 0.15) return pick(r, have);
    const w = constOrInit(uniq('w'), dims, randn(r, dims.reduce((a, b) => a * b, 1), scale));
    weights.set(key, [...have, w]);
    return w;
  };
  const pickVal = (rank?: 4 | 2) => {
    const pool = rank ? vals.filter((v) => v.rank === rank) : vals;
    if (!pool.length) return undefined;
    return r() < 0.6 ? pool[pool.length - 1]! : pick(r, pool);
  };

  const c0 = int(r, 2, 4);
  g.input('x', [1, c0, 3, 3]);
  vals.push({ name: 'x', rank: 4, ch: c0 });
  const k0 = int(r, 2, 5);
  g.input('a', [2, k0]);
  vals.push({ name: 'a', rank: 2, ch: k0 });
  let usedCond = false;

  const steps = int(r, 6, 30);
  for (let s = 0; s < steps; s++) {
    const choice = r();
    if (choice < 0.2) { // Conv
      const v = pickVal(4)!;
      const co = int(r, 2, 4);
      const padded = r() < 0.2;
      const ks = padded ? 3 : 1;
      const ins = [v.name, weight([co, v.ch, ks, ks])];
      if (r() < 0.5) ins.push(constOrInit(uniq('b'), [co], randn(r, co, 0.3)));
      const out = node('Conv', ins, padded ? { pads: [1, 1, 1, 1] } : {});
      vals.push({ name: out, rank: 4, ch: co });
    } else if (choice < 0.25) { // ConvTranspose
      const v = pickVal(4)!;
      const co = int(r, 2, 3);
      const out = node('ConvTranspose', [v.name, weight([v.ch, co, 1, 1])]);
      vals.push({ name: out, rank: 4, ch: co });
    } else if (choice < 0.45) { // BatchNormalization
      const v = pickVal(4)!;
      let ps: string[];
      const same = params.filter((p) => p.length === 4 && p[0]!.endsWith(`_c${v.ch}`));
      if (same.length && r() < 0.15) ps = pick(r, same);
      else {
        const base = uniq('bn');
        const gamma = randn(r, v.ch, 0.4, 1);
        const variance = Float32Array.from(randn(r, v.ch), (x) => 0.2 + x * x);
        ps = [constOrInit(`${base}_s_c${v.ch}`, [v.ch], gamma), constOrInit(`${base}_t_c${v.ch}`, [v.ch], randn(r, v.ch, 0.5)),
          constOrInit(`${base}_m_c${v.ch}`, [v.ch], randn(r, v.ch, 0.5)), constOrInit(`${base}_v_c${v.ch}`, [v.ch], variance)];
        params.push(ps);
      }
      const out = node('BatchNormalization', [v.name, ...ps], { epsilon: f(1e-3) });
      vals.push({ name: out, rank: 4, ch: v.ch });
    } else if (choice < 0.6) { // constant Mul/Add/Sub/Div
      const v = pickVal()!;
      const op = pick(r, ['Mul', 'Add', 'Sub', 'Div']);
      const dims = v.rank === 4 ? pick(r, [[v.ch, 1, 1], [1, v.ch, 1, 1], [1], [3, 3]]) : pick(r, [[v.ch], [1], [2, 1]]);
      const n = dims.reduce((a, b) => a * b, 1);
      const c = constOrInit(uniq('c'), dims, Float32Array.from(randn(r, n, 0.3), (x) => (op === 'Div' || op === 'Mul' ? 1 + x : x)));
      const left = op !== 'Div' && r() < 0.3;
      const out = node(op, left ? [c, v.name] : [v.name, c]);
      vals.push({ ...v, name: out });
    } else if (choice < 0.68) { // Relu
      const v = pickVal()!;
      vals.push({ ...v, name: node('Relu', [v.name]) });
    } else if (choice < 0.78) { // Gemm
      const v = pickVal(2)!;
      const n = int(r, 2, 4);
      const transB = r() < 0.4;
      const ins = [v.name, weight(transB ? [n, v.ch] : [v.ch, n])];
      if (r() < 0.5) ins.push(constOrInit(uniq('gb'), [n], randn(r, n, 0.3)));
      const attrs: Record<string, unknown> = {};
      if (transB) attrs.transB = 1;
      if (r() < 0.3) attrs.beta = f(0.5);
      const out = node('Gemm', ins, attrs);
      vals.push({ name: out, rank: 2, ch: n });
    } else if (choice < 0.86) { // MatMul (sometimes with a bias Add after it)
      const v = pickVal(2)!;
      const n = int(r, 2, 4);
      let out = node('MatMul', [v.name, weight([v.ch, n])]);
      if (r() < 0.4) out = node('Add', [out, g.init(uniq('mb'), [n], randn(r, n, 0.3))]);
      vals.push({ name: out, rank: 2, ch: n });
    } else if (choice < 0.92 && opset >= 17) { // LayerNormalization
      const v = pickVal(2)!;
      const ins = [v.name, g.init(uniq('ln_s'), [v.ch], randn(r, v.ch, 0.3, 1))];
      if (r() < 0.7) ins.push(g.init(uniq('ln_b'), [v.ch], randn(r, v.ch, 0.3)));
      vals.push({ ...v, name: node('LayerNormalization', ins, { epsilon: f(1e-5) }) });
    } else if (choice < 0.97) { // If whose branches fold a Conv + BN on an outer value
      const v = pickVal(4)!;
      if (!usedCond) { g.input('cond', [], 9); usedCond = true; }
      const co = int(r, 2, 3);
      const outerW = weight([co, v.ch, 1, 1]);
      const branch = (tag: string) => {
        const b = new GraphBuilder(tag);
        const w = r() < 0.5 ? outerW : b.init(uniq('bw'), [co, v.ch, 1, 1], randn(r, co * v.ch, 0.5));
        const conv = b.node('Conv', [v.name, w], {}, { name: uniq(`${tag}_conv`) });
        const p = [b.init(uniq('bs'), [co], randn(r, co, 0.3, 1)), b.init(uniq('bt'), [co], randn(r, co, 0.3)),
          b.init(uniq('bm'), [co], randn(r, co, 0.3)), b.init(uniq('bv'), [co], Float32Array.from(randn(r, co), (x) => 0.3 + x * x))];
        const bnOut = b.node('BatchNormalization', [conv, ...p], {}, { name: uniq(`${tag}_bn`) });
        b.output(bnOut, [1, co, 3, 3]);
        return b;
      };
      const out = node('If', ['cond'], { then_branch: branch('then'), else_branch: branch('else') });
      vals.push({ name: out, rank: 4, ch: co });
    } else {
      const v = pickVal(4)!;
      vals.push({ ...v, name: node('Relu', [v.name]) });
    }
  }
  // the last value of each rank is an output, and a few values in between
  const outs = new Set<string>();
  for (const rank of [4, 2] as const) { const last = vals.filter((v) => v.rank === rank).pop(); if (last && last.name !== 'x' && last.name !== 'a') outs.add(last.name); }
  for (const v of vals) if (v.name !== 'x' && v.name !== 'a' && r() < 0.08) outs.add(v.name);
  if (!outs.size) outs.add(node('Relu', ['x']));
  for (const o of outs) g.output(o);
  if (irVersion < 4) for (const t of g.inits) g.input(t.name!, t.dims!.map(Number));
  // a model input that is also an initializer (overridable) now and then
  if (irVersion >= 4 && g.inits.length && r() < 0.15) { const t = pick(r, g.inits); g.input(t.name!, t.dims!.map(Number)); }

  const named = g.nodes.filter((n) => n.name && /^(batchnormalization|mul|add|sub|div|layernormalization)/.test(n.name)).map((n) => n.name!);
  const options: FoldOptions = {};
  if (r() < 0.3) options.cloneShared = true;
  if (r() < 0.2) options.allowOverridable = true;
  if (named.length && r() < 0.2) options.keep = [pick(r, named)];
  if (r() < 0.3) options.reuseBuffers = false;
  return { bytes: modelBytes(g, { irVersion, opset }), options, failSomeProofs: r() < 0.3 };
}
