// Scan (ONNX operator docs, Scan): runs `body` once per slice of the scan inputs, carrying N state values from
// one iteration to the next and stacking K per-iteration scan outputs. The enclosing scope's values are
// visible to the body. The number of iterations is the length of the scan axis, so it is bounded by the data.
//   opset 9-21: inputs (state_1..state_N, scan_1..scan_M); attributes num_scan_inputs, scan_input_axes,
//               scan_input_directions, scan_output_axes, scan_output_directions (negative axes from opset 11).
//   opset 8:    inputs (sequence_lens?, state..., scan...) with a batch axis 0 on every input and output; the
//               scan axis is 1; attribute directions; the body runs per batch entry for that entry's length,
//               and scan outputs past a shorter sequence's end are zero.
import { attrGraph, attrInt, attrInts, elementCount, type Graph } from '../../graph/ir.js';
import { badModel } from '../attrs.js';
import type { Kernel, KernelContext, Value } from '../value.js';
import { alloc } from './common.js';
import { sliceAt, stackAlong } from './scan-axis.js';

function bodyOf(ctx: KernelContext): { body: Graph; M: number } {
  const body = attrGraph(ctx.node, 'body');
  if (!body) throw badModel(ctx, 'attribute body is missing');
  const M = attrInt(ctx.node, 'num_scan_inputs');
  if (M === undefined || M < 1) throw badModel(ctx, 'attribute num_scan_inputs is missing or not positive');
  return { body, M };
}

function flags(ctx: KernelContext, name: string, n: number, dflt: number): number[] {
  const v = attrInts(ctx.node, name) ?? new Array<number>(n).fill(dflt);
  if (v.length !== n) throw badModel(ctx, `attribute ${name} has ${v.length} values; ${n} expected`);
  return v;
}

/** Run the body over `len` iterations: states carried, scan slice k of iteration t from sliceOf(k, t). */
function iterate(body: Graph, states: Value[], M: number, len: number, sliceOf: (k: number, t: number) => Value, ctx: KernelContext): { states: Value[]; scans: Value[][] } {
  const N = states.length;
  if (body.inputs.length !== N + M) throw badModel(ctx, `body has ${body.inputs.length} inputs; ${N + M} expected (${N} states and ${M} scan inputs)`);
  const K = body.outputs.length - N;
  if (K < 0) throw badModel(ctx, `body has ${body.outputs.length} outputs; at least ${N} expected`);
  const scans: Value[][] = Array.from({ length: K }, () => []);
  for (let t = 0; t < len; t++) {
    const feeds = new Map<string, Value>();
    states.forEach((v, k) => feeds.set(body.inputs[k]!.name, v));
    for (let k = 0; k < M; k++) feeds.set(body.inputs[N + k]!.name, sliceOf(k, t));
    const outs = ctx.runSubgraph(body, feeds);
    states = outs.slice(0, N);
    for (let k = 0; k < K; k++) scans[k]!.push(outs[N + k]!);
  }
  return { states, scans };
}

/** Declared slice dims of a body output, for a scan output of zero iterations. */
function declared(body: Graph, i: number): number[] {
  const s = body.outputs[i]?.shape;
  return s && s.every((d) => typeof d === 'number') ? (s as number[]) : [];
}

function run9(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const { body, M } = bodyOf(ctx);
  const all = inputs.map((v, i) => { if (!v) throw badModel(ctx, `input ${i} is missing`); return v; });
  const N = all.length - M;
  if (N < 0) throw badModel(ctx, `num_scan_inputs ${M} is more than the ${all.length} inputs`);
  const K = body.outputs.length - N;
  const scanIns = all.slice(N);
  const inAxes = flags(ctx, 'scan_input_axes', M, 0).map((a, k) => {
    const r = scanIns[k]!.dims.length, x = a < 0 ? a + r : a;
    if (x < 0 || x >= r) throw badModel(ctx, `scan_input_axes[${k}] = ${a} is out of range for rank ${r}`);
    return x;
  });
  const inDirs = flags(ctx, 'scan_input_directions', M, 0);
  const outAxes = flags(ctx, 'scan_output_axes', Math.max(K, 0), 0);
  const outDirs = flags(ctx, 'scan_output_directions', Math.max(K, 0), 0);
  const len = scanIns[0]!.dims[inAxes[0]!]!;
  scanIns.forEach((v, k) => {
    if (v.dims[inAxes[k]!] !== len) throw badModel(ctx, `scan input ${k} has length ${v.dims[inAxes[k]!]} on its scan axis; scan input 0 has ${len}`);
  });
  const res = iterate(body, all.slice(0, N), M, len, (k, t) => sliceAt(scanIns[k]!, inAxes[k]!, inDirs[k] ? len - 1 - t : t, ctx), ctx);
  const scanOuts = res.scans.map((parts, k) => {
    const sliceRank = (parts[0]?.dims ?? declared(body, N + k)).length;
    const a = outAxes[k]! < 0 ? outAxes[k]! + sliceRank + 1 : outAxes[k]!;
    const type = parts[0]?.type ?? body.outputs[N + k]!.elemType ?? 1;
    return stackAlong(parts, a, outDirs[k] !== 0, ctx, `scan output ${k}`, type, declared(body, N + k));
  });
  return [...res.states, ...scanOuts];
}

function run8(inputs: Array<Value | undefined>, ctx: KernelContext): Value[] {
  const { body, M } = bodyOf(ctx);
  const lensIn = inputs[0];
  const rest = inputs.slice(1).map((v, i) => { if (!v) throw badModel(ctx, `input ${i + 1} is missing`); return v; });
  const N = rest.length - M;
  if (N < 0) throw badModel(ctx, `num_scan_inputs ${M} is more than the ${rest.length} state and scan inputs`);
  const K = body.outputs.length - N;
  const dirs = flags(ctx, 'directions', M, 0);
  const scanIns = rest.slice(N);
  for (const v of rest) if (v.dims.length < 1) throw badModel(ctx, 'every input needs a batch axis 0');
  const batch = rest[0]!.dims[0]!;
  const maxLen = scanIns[0]!.dims[1];
  if (maxLen === undefined) throw badModel(ctx, 'scan inputs need a sequence axis 1');
  for (const v of scanIns) if (v.dims[0] !== batch || v.dims[1] !== maxLen) throw badModel(ctx, 'scan inputs disagree on batch size or sequence length');
  const states: Value[][] = Array.from({ length: N }, () => []);
  const scans: Value[][] = Array.from({ length: K }, () => []);
  const lens: number[] = [];
  for (let b = 0; b < batch; b++) {
    const L = lensIn ? lensIn.data[b]! : maxLen;
    if (!Number.isInteger(L) || L < 0 || L > maxLen) throw badModel(ctx, `sequence_lens[${b}] = ${L} is outside [0, ${maxLen}]`);
    lens.push(L);
    const rows = scanIns.map((v) => sliceAt(v, 0, b, ctx));
    const res = iterate(body, rest.slice(0, N).map((v) => sliceAt(v, 0, b, ctx)), M, L, (k, t) => sliceAt(rows[k]!, 0, dirs[k] ? L - 1 - t : t, ctx), ctx);
    res.states.forEach((v, k) => states[k]!.push(v));
    // a shorter sequence's scan outputs are padded with zeros up to the longest
    res.scans.forEach((parts, k) => {
      const sliceDims = parts[0]?.dims ?? declared(body, N + k);
      const type = parts[0]?.type ?? body.outputs[N + k]!.elemType ?? 1;
      while (parts.length < maxLen) parts.push({ type, dims: sliceDims, data: alloc(type, elementCount(sliceDims), ctx) });
      scans[k]!.push(stackAlong(parts, 0, false, ctx, `scan output ${k}`, type, sliceDims));
    });
  }
  const stack = (parts: Value[], k: number, what: string) => stackAlong(parts, 0, false, ctx, what, parts[0]?.type ?? body.outputs[k]!.elemType ?? 1, declared(body, k));
  return [...states.map((p, k) => stack(p, k, `state ${k}`)), ...scans.map((p, k) => stack(p, N + k, `scan output ${k}`))];
}

export const Scan8: Kernel = { op: 'Scan', domain: '', sinceVersion: 8, run: run8 };
export const Scan9: Kernel = { op: 'Scan', domain: '', sinceVersion: 9, run: run9 };
