// Single-node differential checks: build the node with the test builder (onnx-proto's encoder), run it in
// onnxruntime-node (the outside reference, graph optimizations off) and in pleat's evaluator in both
// precisions, and compare every output.
import { expect } from 'vitest';
import { GraphBuilder, modelBytes, T, type AttrIn } from '../helpers/build.js';
import { runOrt, maxDiff, type Feeds } from '../helpers/ort.js';
import { parseModel } from '../../src/onnx/read.js';
import { runModel } from '../../src/eval/run.js';
import type { Value } from '../../src/eval/value.js';

export interface In {
  name: string;
  dims: number[];
  data: ArrayLike<number>;
  type?: number;
  /** Held as an initializer instead of a graph input. */
  init?: boolean;
}

export interface Outcome {
  ort: Record<string, { dims: number[]; data: Float64Array }>;
  f64: Map<string, Value>;
  f32: Map<string, Value>;
}

function feedOf(i: In): Feeds[string] {
  const type = i.type ?? T.FLOAT;
  if (type === T.FLOAT) return { dims: i.dims, data: Float32Array.from(i.data) };
  if (type === T.DOUBLE) return { dims: i.dims, data: Float64Array.from(i.data) };
  if (type === T.INT64) return { dims: i.dims, data: BigInt64Array.from(Array.from(i.data, (v) => BigInt(v))) };
  if (type === T.INT32) return { dims: i.dims, data: Int32Array.from(i.data) };
  if (type === T.BOOL || type === T.UINT8) return { dims: i.dims, data: Uint8Array.from(i.data) };
  if (type === T.INT8) return { dims: i.dims, data: Int8Array.from(i.data) };
  if (type === T.INT16) return { dims: i.dims, data: Int16Array.from(i.data) };
  if (type === T.UINT16) return { dims: i.dims, data: Uint16Array.from(i.data) };
  if (type === T.UINT32) return { dims: i.dims, data: Uint32Array.from(i.data) };
  if (type === T.UINT64) return { dims: i.dims, data: BigUint64Array.from(Array.from(i.data, (v) => BigInt(v))) };
  throw new Error(`harness: no feed for type ${type}`);
}

/** Build a one-node model. Inputs named '' are omitted optional inputs. */
export function oneNode(op: string, ins: In[], attrs: Record<string, AttrIn>, outputs: string[]): GraphBuilder {
  const g = new GraphBuilder();
  for (const i of ins) {
    if (!i.name) continue;
    if (i.init) g.init(i.name, i.dims, i.data, i.type ?? T.FLOAT);
    else g.input(i.name, i.dims, i.type ?? T.FLOAT);
  }
  // an output may carry its type as 'name:int64'
  for (const o of outputs) if (o) g.output(o.split(':')[0]!, undefined, o.endsWith(':int64') ? T.INT64 : o.endsWith(':bool') ? T.BOOL : T.FLOAT);
  g.node(op, ins.map((i) => i.name), attrs, { name: `${op.toLowerCase()}_under_test`, outputs: outputs.map((o) => o.split(':')[0]!) });
  return g;
}

/** Run a built model in onnxruntime-node and in pleat (float64 and float32 modes). */
export async function runBoth(g: GraphBuilder, ins: In[], opset: number): Promise<Outcome> {
  const bytes = modelBytes(g, { opset, irVersion: opset >= 15 ? 8 : 7 });
  const feeds: Feeds = {};
  const ours = new Map<string, Value>();
  for (const i of ins) {
    if (!i.name || i.init) continue;
    feeds[i.name] = feedOf(i);
    ours.set(i.name, { type: i.type ?? T.FLOAT, dims: i.dims, data: Float64Array.from(i.data) });
  }
  const ort = await runOrt(bytes, feeds);
  const model = parseModel(bytes, '.');
  const f64 = runModel(model, ours, { precision: 'float64' });
  const f32 = runModel(model, ours, { precision: 'float32' });
  return { ort, f64, f32 };
}

/**
 * Build, run and compare: every output must have onnxruntime's dims and agree within `rel` of the output's
 * scale (float32 rounding in onnxruntime; float32 mode gets 4x the room).
 */
export async function checkOp(op: string, opset: number, ins: In[], attrs: Record<string, AttrIn> = {}, outputs = ['y'], rel = 1e-5, label = ''): Promise<Outcome> {
  const g = oneNode(op, ins, attrs, outputs);
  const res = await runBoth(g, ins, opset);
  for (const oo of outputs) {
    const o = oo.split(':')[0]!;
    if (!o) continue;
    const ref = res.ort[o]!;
    const what = `${op}@${opset} ${label} ${JSON.stringify(attrs)} output ${o}`;
    for (const [mode, vals, tol] of [['float64', res.f64, rel], ['float32', res.f32, 4 * rel]] as const) {
      const v = vals.get(o)!;
      expect(v.dims, `${what} dims (${mode})`).toEqual(ref.dims);
      const { maxAbs, scale } = maxDiff(v.data, ref.data);
      expect(maxAbs, `${what} (${mode}) maxAbs ${maxAbs} scale ${scale}`).toBeLessThanOrEqual(tol * Math.max(scale, 1e-3));
    }
    if (oo === o) expect(res.f32.get(o)!.data).toBeInstanceOf(Float32Array);
    expect(res.f64.get(o)!.data).toBeInstanceOf(Float64Array);
  }
  return res;
}
