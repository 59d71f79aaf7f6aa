// Loop (opsets 1-21, tensor values): runs `body` while the trip count and the condition allow, with the
// enclosing scope's values visible. Body inputs: (iteration_num, cond, v_1..v_N); body outputs: (cond,
// v_1..v_N, scan_1..scan_K). Node outputs: the final v_1..v_N, then each scan output stacked along a new axis 0
// (ONNX operator docs, Loop). Sequence- and optional-typed loop values (opset 13 and 16 forms) are not tensors
// and are refused by the evaluator's value model.
import { attrGraph, DataType, type Graph } from '../../graph/ir.js';
import { PleatError } from '../../errors.js';
import { badModel, nodeLabel } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { stackAlong } from './scan-axis.js';

/**
 * Most iterations one Loop node may run in pleat's evaluator. A model controls its own trip count and exit
 * condition, so without a bound a crafted file could keep the check running forever; 100000 is far above the
 * loops of exported models (decoding steps, detection post-processing) and still finishes for small bodies.
 */
export const MAX_LOOP_ITERATIONS = 100_000;

/** The declared dims of a graph output when all are known (used for the shape of an empty scan output). */
function declaredDims(g: Graph, i: number): number[] {
  const dims = g.outputs[i]?.shape;
  if (!dims || dims.some((d) => typeof d !== 'number')) return [];
  return dims as number[];
}

function run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const body = attrGraph(ctx.node, 'body');
  if (!body) throw badModel(ctx, 'attribute body is missing');
  const M = inputs[0], C = inputs[1];
  const carried0 = inputs.slice(2);
  const N = carried0.length;
  if (body.inputs.length !== N + 2) throw badModel(ctx, `body has ${body.inputs.length} inputs; ${N + 2} expected (iteration_num, cond and ${N} loop-carried values)`);
  const K = body.outputs.length - 1 - N;
  if (K < 0) throw badModel(ctx, `body has ${body.outputs.length} outputs; at least ${N + 1} expected (cond and ${N} loop-carried values)`);
  if (ctx.node.outputs.length > N + K) throw badModel(ctx, `the node has ${ctx.node.outputs.length} outputs but the body gives ${N + K}`);
  if (M && M.data.length !== 1) throw badModel(ctx, `M has ${M.data.length} elements; it must hold one`);
  if (C && C.data.length !== 1) throw badModel(ctx, `cond has ${C.data.length} elements; it must hold one`);
  const tripCount = M ? M.data[0]! : Infinity;
  let cond = C ? C.data[0] !== 0 : true;
  let carried = carried0.map((v, k) => {
    if (!v) throw badModel(ctx, `loop-carried input ${k + 2} is missing`);
    return v;
  });
  const scans: Value[][] = Array.from({ length: K }, () => []);
  let i = 0;
  for (; i < tripCount && cond; i++) {
    if (i >= MAX_LOOP_ITERATIONS) {
      throw new PleatError('unsupported-op', `${nodeLabel(ctx.node)}: the loop runs past ${MAX_LOOP_ITERATIONS} iterations, pleat's evaluator's bound for one Loop node (a trip count or exit condition the model sets)`);
    }
    const feeds = new Map<string, Value>();
    feeds.set(body.inputs[0]!.name, { type: DataType.INT64, dims: [], data: Float64Array.of(i) });
    feeds.set(body.inputs[1]!.name, { type: DataType.BOOL, dims: [], data: Float64Array.of(cond ? 1 : 0) });
    carried.forEach((v, k) => feeds.set(body.inputs[k + 2]!.name, v));
    const outs = ctx.runSubgraph(body, feeds);
    const c = outs[0]!;
    if (c.data.length !== 1) throw badModel(ctx, `body output cond has ${c.data.length} elements; it must hold one`);
    cond = c.data[0] !== 0;
    carried = outs.slice(1, 1 + N);
    for (let k = 0; k < K; k++) scans[k]!.push(outs[1 + N + k]!);
  }
  const scanOuts = scans.map((parts, k) => stackAlong(parts, 0, false, ctx, `scan output ${k}`, parts[0]?.type ?? body.outputs[1 + N + k]?.elemType ?? DataType.FLOAT, declaredDims(body, 1 + N + k)));
  return [...carried, ...scanOuts];
}

export const Loop: Kernel = { op: 'Loop', domain: '', sinceVersion: 1, run };
