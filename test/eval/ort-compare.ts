// Differential check of one node against onnxruntime-node (the outside reference; graph optimizations off),
// for nodes whose outputs may be integer or bool: outputs are declared with their real element type, float
// outputs must agree within float32 rounding and integer/bool outputs exactly. Also random-shape helpers for
// the property-style loops over seeds.
import { expect } from 'vitest';
import { GraphBuilder, T, randn, rng, type AttrIn } from '../helpers/build.js';
import { runBoth, type In, type Outcome } from './harness.js';

export { T, rng, randn, type In };

export interface Out { name: string; type?: number }

/** Per-element tolerance for float outputs: float32 rounding of onnxruntime's result, with room for a few ulps. */
export const REL64 = 2e-6;

export async function vsOrt(op: string, opset: number, ins: In[], attrs: Record<string, AttrIn> = {}, outs: Out[] = [{ name: 'y' }], rel = REL64): Promise<Outcome> {
  const g = new GraphBuilder();
  for (const i of ins) {
    if (!i.name) continue;
    if (i.init) g.init(i.name, i.dims, i.data, i.type ?? T.FLOAT);
    else g.input(i.name, i.dims, i.type ?? T.FLOAT);
  }
  for (const o of outs) if (o.name) g.output(o.name, undefined, o.type ?? T.FLOAT);
  g.node(op, ins.map((i) => i.name), attrs, { name: `${op.toLowerCase()}_under_test`, outputs: outs.map((o) => o.name) });
  return vsOrtGraph(g, ins, opset, outs, rel, `${op}@${opset} ${JSON.stringify(attrs)} inputs ${ins.map((i) => `[${i.dims}]`).join(' ')}`);
}

/** Run a built graph in onnxruntime-node and pleat and compare the outputs `outs` (floats within rel, integers exactly). */
export async function vsOrtGraph(g: GraphBuilder, ins: In[], opset: number, outs: Out[], rel = REL64, what = ''): Promise<Outcome> {
  const res = await runBoth(g, ins, opset);
  for (const o of outs) {
    if (!o.name) continue;
    const ref = res.ort[o.name]!;
    const float = (o.type ?? T.FLOAT) === T.FLOAT || o.type === T.DOUBLE;
    for (const [mode, vals, tol] of [['float64', res.f64, rel], ['float32', res.f32, 4 * rel]] as const) {
      const v = vals.get(o.name)!;
      expect(v.dims, `${what} ${o.name} dims (${mode})`).toEqual(ref.dims);
      expect(v.type, `${what} ${o.name} type (${mode})`).toBe(o.type ?? T.FLOAT);
      // the Value contract: integer/bool data is always Float64Array, float data follows the precision
      const want = float && mode === 'float32' ? Float32Array : Float64Array;
      expect(v.data, `${what} ${o.name} storage (${mode})`).toBeInstanceOf(want);
      for (let k = 0; k < ref.data.length; k++) {
        const a = v.data[k]!, b = ref.data[k]!;
        if (a === b || (Number.isNaN(a) && Number.isNaN(b))) continue;
        if (float && Math.abs(a - b) <= tol * Math.max(1, Math.abs(b))) continue;
        expect.fail(`${what} ${o.name} (${mode}) element ${k}: pleat ${a}, onnxruntime ${b}`);
      }
    }
  }
  return res;
}

/** A random shape of rank lo..hi with dims 1..maxDim. */
export function randShape(r: () => number, lo = 0, hi = 4, maxDim = 4): number[] {
  const rank = lo + Math.floor(r() * (hi - lo + 1));
  return Array.from({ length: rank }, () => 1 + Math.floor(r() * maxDim));
}

/** A shape that broadcasts against `dims`: a random suffix of it with some axes set to 1. */
export function bcastShape(r: () => number, dims: number[]): number[] {
  const drop = Math.floor(r() * (dims.length + 1));
  return dims.slice(drop).map((d) => (r() < 0.3 ? 1 : d));
}

export function count(dims: number[]): number {
  return dims.reduce((a, b) => a * b, 1);
}

/** Random integers in [lo, hi]. */
export function randInt(r: () => number, n: number, lo: number, hi: number): number[] {
  return Array.from({ length: n }, () => lo + Math.floor(r() * (hi - lo + 1)));
}

export const SEEDS = [1, 2, 3, 4, 5, 6];
