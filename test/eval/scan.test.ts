// Scan against onnxruntime-node (graph optimizations off) on seeded random models: opset 9/11/16 forms with
// random scan_input_axes, scan_input_directions, scan_output_axes (negative from opset 11) and
// scan_output_directions, and the opset-8 form with a batch axis and sequence_lens. The body carries a state,
// reads an outer-scope value and emits two scan outputs. The fixed cases test_scan_sum and test_scan9_sum of the
// ONNX backend data (onnx 1.12.0) run in conformance.test.ts.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, randn, rng, T } from '../helpers/build.js';
import { runOrt, type Feeds } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import type { Value } from '../../src/eval/value.js';

/** Body: s' = s + x1 (* w, w from the enclosing scope) [+ x2]; scan outputs s' * x1 and Sigmoid(s'). */
function body(M: number, dims: number[]): GraphBuilder {
  const b = new GraphBuilder('body');
  b.input('s', undefined, T.FLOAT);
  for (let k = 0; k < M; k++) b.input(`x${k}`, undefined, T.FLOAT);
  b.node('Mul', ['x0', 'w'], {}, { outputs: ['xw'] });
  b.node('Add', ['s', 'xw'], {}, { outputs: [M > 1 ? 's1' : 's_out'] });
  if (M > 1) b.node('Add', ['s1', 'x1'], {}, { outputs: ['s_out'] });
  b.node('Mul', ['s_out', 'x0'], {}, { outputs: ['o1'] });
  b.node('Sigmoid', ['s_out'], {}, { outputs: ['o2'] });
  // onnxruntime wants the body's output shapes declared
  b.output('s_out', dims, T.FLOAT);
  b.output('o1', dims, T.FLOAT);
  b.output('o2', dims, T.FLOAT);
  return b;
}

async function compare(bytes: Uint8Array, feeds: Feeds, ours: Map<string, Value>, what: string): Promise<void> {
  const ref = await runOrt(bytes, feeds);
  const m = parseModel(bytes, '.');
  for (const precision of ['float64', 'float32'] as const) {
    const out = runModel(m, ours, { precision });
    for (const name of ['s_final', 'o1_all', 'o2_all']) {
      const got = out.get(name)!, want = ref[name]!;
      expect(got.dims, `${what} ${precision} ${name}`).toEqual(want.dims);
      for (let k = 0; k < want.data.length; k++) {
        expect(Math.abs(got.data[k]! - want.data[k]!), `${what} ${precision} ${name} element ${k}`).toBeLessThanOrEqual(2e-5 * Math.max(1, Math.abs(want.data[k]!)));
      }
    }
  }
}

function feedsOf(vals: Array<[string, number[], Float32Array]>): { feeds: Feeds; ours: Map<string, Value> } {
  const feeds: Feeds = {};
  const ours = new Map<string, Value>();
  for (const [name, dims, data] of vals) {
    feeds[name] = { dims, data };
    ours.set(name, { type: T.FLOAT, dims, data: Float64Array.from(data) });
  }
  return { feeds, ours };
}

describe('Scan vs onnxruntime-node', () => {
  it('opsets 9, 11 and 16: random scan axes and directions (seeded)', async () => {
    for (let seed = 1; seed <= 12; seed++) {
      const r = rng(seed);
      const opset = [9, 11, 16][seed % 3]!;
      const M = 1 + (seed % 2);
      const len = 1 + Math.floor(r() * 4);
      const slice = [1 + Math.floor(r() * 3), 1 + Math.floor(r() * 3)];
      const inAxes = Array.from({ length: M }, () => Math.floor(r() * 3));
      const inDirs = Array.from({ length: M }, () => (r() < 0.5 ? 1 : 0));
      const outAxes = Array.from({ length: 2 }, () => {
        const a = Math.floor(r() * 3);
        return opset >= 11 && r() < 0.5 ? a - 3 : a;
      });
      const outDirs = Array.from({ length: 2 }, () => (r() < 0.5 ? 1 : 0));
      const g = new GraphBuilder();
      const vals: Array<[string, number[], Float32Array]> = [['s0', slice, randn(r, slice[0]! * slice[1]!)], ['w', slice, randn(r, slice[0]! * slice[1]!)]];
      for (let k = 0; k < M; k++) {
        const dims = [...slice];
        dims.splice(inAxes[k]!, 0, len);
        vals.push([`xs${k}`, dims, randn(r, len * slice[0]! * slice[1]!)]);
      }
      for (const [name] of vals) g.input(name, undefined, T.FLOAT);
      for (const o of ['s_final', 'o1_all', 'o2_all']) g.output(o);
      g.node('Scan', ['s0', ...Array.from({ length: M }, (_, k) => `xs${k}`)], {
        body: body(M, slice), num_scan_inputs: M, scan_input_axes: inAxes, scan_input_directions: inDirs,
        scan_output_axes: outAxes, scan_output_directions: outDirs,
      }, { outputs: ['s_final', 'o1_all', 'o2_all'] });
      const { feeds, ours } = feedsOf(vals);
      await compare(modelBytes(g, { opset }), feeds, ours, `seed ${seed} opset ${opset} in ${inAxes}/${inDirs} out ${outAxes}/${outDirs}`);
    }
  });

  it('opset 8: batch axis, directions and sequence_lens (seeded)', async () => {
    for (let seed = 21; seed <= 28; seed++) {
      const r = rng(seed);
      const M = 1 + (seed % 2);
      const batch = 1 + Math.floor(r() * 3), len = 1 + Math.floor(r() * 4), width = 1 + Math.floor(r() * 3);
      const dirs = Array.from({ length: M }, () => (r() < 0.5 ? 1 : 0));
      const withLens = seed % 3 !== 0;
      const lens = Array.from({ length: batch }, () => 1 + Math.floor(r() * len));
      const g = new GraphBuilder();
      const vals: Array<[string, number[], Float32Array]> = [['s0', [batch, width], randn(r, batch * width)]];
      for (let k = 0; k < M; k++) vals.push([`xs${k}`, [batch, len, width], randn(r, batch * len * width)]);
      for (const [name] of vals) g.input(name, undefined, T.FLOAT);
      g.init('w', [width], randn(r, width));
      if (withLens) g.init('lens', [batch], lens, T.INT64);
      for (const o of ['s_final', 'o1_all', 'o2_all']) g.output(o);
      g.node('Scan', [withLens ? 'lens' : '', 's0', ...Array.from({ length: M }, (_, k) => `xs${k}`)], {
        body: body(M, [width]), num_scan_inputs: M, directions: dirs,
      }, { outputs: ['s_final', 'o1_all', 'o2_all'] });
      const { feeds, ours } = feedsOf(vals);
      await compare(modelBytes(g, { opset: 8, irVersion: 7 }), feeds, ours, `seed ${seed} opset 8 dirs ${dirs} lens ${withLens ? lens : '-'}`);
    }
  });
});
