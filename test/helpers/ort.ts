// onnxruntime-node as an independent reference runtime: graph optimizations disabled, one thread, CPU.
import * as ort from 'onnxruntime-node';

export type Feeds = Record<string, { dims: number[]; data: Float32Array | Float64Array | BigInt64Array | Int32Array | Uint8Array | Int8Array | Int16Array | Uint16Array | Uint32Array | BigUint64Array }>;

const TYPE_OF: Record<string, ort.Tensor.Type> = {
  Float32Array: 'float32', Float64Array: 'float64', BigInt64Array: 'int64', Int32Array: 'int32', Uint8Array: 'uint8',
  Int8Array: 'int8', Int16Array: 'int16', Uint16Array: 'uint16', Uint32Array: 'uint32', BigUint64Array: 'uint64',
};

export async function runOrt(model: Uint8Array | string, feeds: Feeds): Promise<Record<string, { dims: number[]; data: Float64Array }>> {
  const session = await ort.InferenceSession.create(model as never, {
    graphOptimizationLevel: 'disabled', intraOpNumThreads: 1, interOpNumThreads: 1, executionProviders: ['cpu'],
  });
  const inputs: Record<string, ort.Tensor> = {};
  for (const [k, v] of Object.entries(feeds)) inputs[k] = new ort.Tensor(TYPE_OF[v.data.constructor.name]!, v.data as never, v.dims);
  const res = await session.run(inputs);
  const out: Record<string, { dims: number[]; data: Float64Array }> = {};
  for (const [k, v] of Object.entries(res)) {
    const d = v.data as ArrayLike<number | bigint>;
    out[k] = { dims: [...v.dims], data: Float64Array.from(Array.from(d, Number)) };
  }
  await session.release();
  return out;
}

/** Largest absolute difference, and the largest absolute value of the reference (the output's scale). */
export function maxDiff(a: ArrayLike<number>, b: ArrayLike<number>): { maxAbs: number; scale: number } {
  if (a.length !== b.length) throw new Error(`length ${a.length} != ${b.length}`);
  let maxAbs = 0, scale = 0;
  for (let i = 0; i < a.length; i++) {
    const d = Math.abs(a[i]! - b[i]!);
    if (!(d <= maxAbs)) maxAbs = Number.isNaN(d) ? Infinity : d;
    scale = Math.max(scale, Math.abs(b[i]!));
  }
  return { maxAbs, scale };
}
