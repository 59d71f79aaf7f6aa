// The figures a proven fold reports stay what they were while the evaluator is made faster: each per-fold proof
// of a seeded Conv + BatchNormalization chain against a plain float64 evaluation of its region written out here
// (the ONNX operator documentation's Conv and BatchNormalization formulas, inference mode), and the ledger's
// proof figures and the whole-model check's figures of the demo models and seeded chains against digests taken
// from the evaluator before it held values by slot (commit f93722a).
import { createHash } from 'node:crypto';
import { join } from 'node:path';
import { ROOT } from '../helpers/cli.js';
import { describe, expect, it } from 'vitest';
import { chainModel } from '../bench/gen-chain.js';
import { foldModel } from '../../src/fold/index.js';
import { foldLoaded } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)
import { readModelFile } from '../../src/onnx/read.js';
import { proveFold } from '../../src/verify/prove.js';
import { probeValue } from '../../src/verify/inputs.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { attrFloat, DataType, type Graph } from '../../src/graph/ir.js';
import type { FoldReport } from '../../src/jobs/types.js';

const models = join(ROOT, 'models');

const weights = (g: Graph, name: string) => tensorToFloat64(g.initializers.find((t) => t.name === name)!);

/** A 1x1 Conv (optional bias) of x [1,C,H,W], then an optional inference-mode BatchNormalization. */
function plainRegion(g: Graph, x: Float64Array, hw: number): Float64Array {
  let y = x;
  for (const n of g.nodes) {
    if (n.opType === 'Conv') {
      const w = weights(g, n.inputs[1]!), b = n.inputs[2] ? weights(g, n.inputs[2]) : undefined;
      const co = w.length / (y.length / hw), ci = y.length / hw;
      const out = new Float64Array(co * hw);
      for (let o = 0; o < co; o++) for (let p = 0; p < hw; p++) {
        let s = b ? b[o]! : 0;
        for (let c = 0; c < ci; c++) s += w[o * ci + c]! * y[c * hw + p]!;
        out[o * hw + p] = s;
      }
      y = out;
    } else if (n.opType === 'BatchNormalization') {
      const [s, t, m, v] = n.inputs.slice(1).map((i) => weights(g, i));
      const eps = attrFloat(n, 'epsilon', 1e-5);
      y = y.map((val, i) => { const c = Math.floor(i / hw); return ((val - m![c]!) / Math.sqrt(v![c]! + eps)) * s![c]! + t![c]!; });
    } else throw new Error(`unexpected ${n.opType} in the region`);
  }
  return y;
}

describe('per-fold proof figures', () => {
  it('each proof of a seeded chain measures what a plain float64 evaluation of its region gives', () => {
    for (const seed of [4, 5]) {
      let proofs = 0;
      foldModel(chainModel(12, seed), {
        prove: (c) => {
          const r = proveFold(c, { seed });
          expect(r.shape).toEqual([1, 4, 2, 2]);
          const input = c.before.inputs[0]!.name;
          let maxAbs = 0;
          for (let p = 0; p < 2; p++) {
            const x = probeValue({ name: input, type: DataType.FLOAT, dims: [1, 4, 2, 2] }, seed, p).data as Float64Array;
            const a = plainRegion(c.before, x, 4), b = plainRegion(c.after, x, 4);
            for (let i = 0; i < a.length; i++) maxAbs = Math.max(maxAbs, Math.abs(a[i]! - b[i]!));
          }
          // the summation order of the evaluator's kernels may differ from the loop above in the last bits
          expect(Math.abs(r.maxAbs - maxAbs)).toBeLessThan(1e-14);
          expect(r.passed).toBe(true);
          proofs++;
          return { passed: r.passed, proof: { maxAbs: r.maxAbs, maxRel: r.maxRel, shape: r.shape } };
        },
      });
      expect(proofs).toBe(12);
    }
  });

  it('the ledger and the whole-model check report the same figures as before (digests)', () => {
    const figures = (r: FoldReport) => JSON.stringify({
      proofs: r.normalizations.map((e) => [e.node, e.status, e.proof ?? null]),
      check: r.check && { status: r.check.status, outputs: r.check.outputs.map((o) => [o.name, o.maxAbs, o.maxRel, o.rms, o.cosine, o.count]), coverage: r.check.coverage },
    });
    const digest = (r: FoldReport) => createHash('sha256').update(figures(r)).digest('hex').slice(0, 16);
    const got: Record<string, string> = {};
    for (const f of ['pump-vibration', 'tray-edge', 'tray-sorter']) {
      const p = join(models, `${f}.onnx`);
      got[f] = digest(foldLoaded(readModelFile(p), readModelFile(p), f, { seed: 3 }));
    }
    for (const seed of [1, 2]) got[`chain${seed}`] = digest(foldLoaded(chainModel(40, seed), chainModel(40, seed), 'chain', { seed }));
    expect(got).toEqual({
      'pump-vibration': '5a14dde014e22f35', 'tray-edge': '3b978e0d9d1a13a7', 'tray-sorter': '0f59c457e3f57884',
      chain1: 'a936af45cbf8479d', chain2: 'b5831ff237abf039',
    });
  });
});
