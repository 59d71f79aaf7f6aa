// The numeric proof of one fold: the region the fold rewrites is run before and after the edit on seeded
// probes of a small valid shape, in float64, and must agree within the rounding of the weights' storage type.
// No model input shapes are needed: each region input gets a shape derived from the layer that reads it.
import type { DataTypeCode, Dim, Graph, Node, Tensor } from '../graph/ir.js';
import { DataType, attrInt, attrInts } from '../graph/ir.js';
import type { ProofCase } from '../fold/types.js';
import type { Value } from '../eval/value.js';
import { runLockstep } from '../eval/lockstep.js';
import { probeValue } from './inputs.js';
import { computeMetrics } from './metrics.js';

export interface ProofResult {
  passed: boolean;
  /** Largest |after - before| over outputs and probes. */
  maxAbs: number;
  /** Largest relative error over outputs and probes (the metric maxRel of metrics.ts). */
  maxRel: number;
  /** The probe shape of the region's first input ([] when the proof found none). */
  shape: number[];
  /** Largest |before| (the scale the tolerance is relative to). */
  scale: number;
  tolerance: number;
  /** Set when the proof could not run (then passed is false). */
  problem?: string;
}

/**
 * Relative tolerance by the coarsest float storage type among the region's constants. A folded weight is the
 * exact product rounded once to its storage type, so the region's outputs differ by a few units in the last
 * place of that type, summed over the reduction (common practice; no published source).
 */
const RTOL: Record<number, number> = {
  [DataType.DOUBLE]: 1e-9,
  [DataType.FLOAT]: 2e-5,
  [DataType.FLOAT16]: 2e-2,
  [DataType.BFLOAT16]: 8e-2,
};

function tolerance(graphs: Graph[]): number {
  let tol = RTOL[DataType.DOUBLE]!;
  for (const g of graphs) for (const t of g.initializers) tol = Math.max(tol, RTOL[t.dataType] ?? 0);
  return tol;
}

const init = (g: Graph, name: string): Tensor | undefined => g.initializers.find((t) => t.name === name);

/** Small valid shapes for `value`, most likely first, from the first node of the region that reads it. */
function probeShapes(g: Graph, value: string, declaredRank: number | undefined): number[][] {
  // A norm's rank is only known from the declaration or from what reads it next: try the likely ones.
  const ranks = declaredRank !== undefined ? [declaredRank] : [4, 2, 3, 5];
  const shapes: number[][] = [];
  const add = (n: Node, at: number) => {
    for (const r of ranks) { const s = shapeFor(g, n, at, r); if (s) shapes.push(s); }
  };
  // Norms and per-channel steps keep the shape they are given, so the linear layer of the region (whichever
  // side it is on) says best what the activation looks like; then whatever reads the value first.
  for (const n of g.nodes) if (LAYERS.has(n.opType)) add(n, 0);
  for (const n of g.nodes) {
    const at = n.inputs.indexOf(value);
    if (at >= 0) { add(n, at); break; }
  }
  // Several layers reading the value (a fold into every reader): for each rank, the smallest shape all of them
  // accept goes before that rank's shape.
  const layerShapes = new Map<number, number[][]>();
  for (const n of g.nodes) {
    if (!LAYERS.has(n.opType) || (!n.inputs.includes(value) && !readsThroughSteps(g, n, value))) continue;
    for (const r of ranks) {
      const s = shapeFor(g, n, 0, r);
      if (s) layerShapes.set(s.length, [...(layerShapes.get(s.length) ?? []), s]);
    }
  }
  const all: number[][] = [];
  for (const s of shapes) {
    const same = layerShapes.get(s.length) ?? [];
    if (same.length > 1) all.push(s.map((d, i) => Math.max(d, ...same.map((t) => t[i]!))));
    all.push(s);
  }
  return all.filter((s, i) => all.findIndex((t) => t.join() === s.join()) === i);
}

const LAYERS = new Set(['Conv', 'ConvTranspose', 'Gemm', 'MatMul']);

/** Whether layer `n` reads `value` through shape-keeping steps of the region (a norm, a Mul/Add by a constant). */
function readsThroughSteps(g: Graph, n: Node, value: string): boolean {
  const seen = new Set<string>();
  const visit = (v: string | undefined): boolean => {
    if (!v || seen.has(v)) return false;
    seen.add(v);
    if (v === value) return true;
    const p = g.nodes.find((m) => m.outputs.includes(v));
    return p !== undefined && !LAYERS.has(p.opType) && p.inputs.some(visit);
  };
  return visit(n.inputs[0]);
}

function shapeFor(g: Graph, n: Node, at: number, rank: number | undefined): number[] | undefined {
  const other = (i: number) => (n.inputs[i] ? init(g, n.inputs[i]!) : undefined);
  switch (n.opType) {
    case 'Conv': {
      const w = other(1);
      if (at !== 0 || !w) return undefined;
      const group = attrInt(n, 'group', 1);
      const k = w.dims.slice(2);
      const dil = attrInts(n, 'dilations') ?? k.map(() => 1);
      const str = attrInts(n, 'strides') ?? k.map(() => 1);
      // one sample; each spatial axis the kernel's reach plus one stride, so every tap meets data at two output
      // positions per axis and the border positions meet the padding (the cost of a proof is the weight times
      // the output positions, and a large layer's proof is the bulk of a proven fold's work)
      return [1, w.dims[1]! * group, ...k.map((kk, i) => (kk - 1) * dil[i]! + 1 + str[i]!)];
    }
    case 'ConvTranspose': {
      const w = other(1);
      if (at !== 0 || !w) return undefined;
      return [2, w.dims[0]!, ...w.dims.slice(2).map(() => 3)];
    }
    case 'Gemm': {
      const b = other(1);
      if (at !== 0 || !b) return undefined;
      const k = attrInt(n, 'transB', 0) ? b.dims[1]! : b.dims[0]!;
      return attrInt(n, 'transA', 0) ? [k, 3] : [3, k];
    }
    case 'MatMul': {
      const b = other(1);
      if (at !== 0 || !b || b.dims.length !== 2) return undefined;
      const r = Math.max(rank ?? 2, 2);
      return [...Array(r - 2).fill(2), 3, b.dims[0]!];
    }
    case 'BatchNormalization': case 'InstanceNormalization': {
      const s = other(1);
      if (at !== 0 || !s) return undefined;
      const r = Math.max(rank ?? 4, 2);
      return [2, s.dims[0]!, ...Array(r - 2).fill(4)];
    }
    case 'Add': case 'Sub': case 'Mul': case 'Div': {
      const c = other(1 - at);
      if (!c) return undefined;
      const r = Math.max(rank ?? c.dims.length, c.dims.length, 1);
      // broadcast-compatible: the constant's trailing dims, padded with small sizes in front
      const lead = Array(r - c.dims.length).fill(0).map((_, i) => (i === 0 ? 2 : 3));
      return [...lead, ...c.dims.map((d) => (d === 1 ? 3 : d))];
    }
    default:
      return undefined;
  }
}

/**
 * The small probe shapes, then the same shapes with every dim the model declares as a number put in (and the
 * declared shape itself when it is wholly known and of a rank no small shape has). The small ones come first,
 * as the proof's cost grows with the shape; the declared dims are for regions whose constants fix a dim the
 * layer does not say, such as a Gemm whose C has one bias per row ([M, 1]): only M rows broadcast against it.
 * A symbolic dim keeps its small probe size.
 */
function withDeclaredDims(shapes: number[][], declared: readonly Dim[] | undefined): number[][] {
  if (!declared) return shapes;
  const known = (d: Dim): d is number => typeof d === 'number' && d > 0;
  const all = [...shapes];
  for (const s of shapes) {
    if (s.length === declared.length) all.push(s.map((d, k) => (known(declared[k]!) ? declared[k] as number : d)));
  }
  if (declared.length > 0 && declared.every(known) && !shapes.some((s) => s.length === declared.length)) all.push([...declared] as number[]);
  return all.filter((s, i) => all.findIndex((t) => t.join() === s.join()) === i);
}

function sameDims(a: readonly number[], b: readonly number[]): boolean {
  return a.length === b.length && a.every((d, i) => d === b[i]);
}

export function proveFold(c: ProofCase, opts: { probes?: number; seed?: number } = {}): ProofResult {
  const probes = opts.probes ?? 2;
  const seed = opts.seed ?? 0;
  const tol = tolerance([c.before, c.after]);
  const options: Array<{ name: string; type: DataTypeCode; shapes: number[][] }> = [];
  for (const i of c.before.inputs) {
    const shapes = withDeclaredDims(probeShapes(c.before, i.name, i.shape?.length), i.shape);
    if (!shapes.length) return { passed: false, maxAbs: NaN, maxRel: NaN, shape: [], scale: NaN, tolerance: tol, problem: `no probe shape for region input '${i.name}'` };
    options.push({ name: i.name, type: i.elemType ?? DataType.FLOAT, shapes });
  }
  // The first combination of candidate shapes the original region accepts is the probe shape. Each side runs
  // all its probes together (src/eval/lockstep.ts): the region's weights are decoded once per side.
  const runAll = (g: Graph, sets: Array<Map<string, Value>>) => runLockstep([{ graph: g, opsetOf: c.opsetOf, precision: 'float64', probes: sets }])[0]!;
  let specs: Array<{ name: string; type: DataTypeCode; dims: number[] }> | undefined;
  let probeSets: Array<Map<string, Value>> = [];
  let beforeOut: Array<Map<string, Value>> = [];
  const tries = Math.max(...options.map((o) => o.shapes.length), 1);
  for (let k = 0; k < tries && !specs; k++) {
    const candidate = options.map((o) => ({ name: o.name, type: o.type, dims: o.shapes[Math.min(k, o.shapes.length - 1)]! }));
    const sets = Array.from({ length: probes }, (_, p) => new Map<string, Value>(candidate.map((s) => [s.name, probeValue(s, seed, p)])));
    try {
      beforeOut = runAll(c.before, sets);
      specs = candidate;
      probeSets = sets;
    } catch { /* try the next shape */ }
  }
  if (!specs) return { passed: false, maxAbs: NaN, maxRel: NaN, shape: [], scale: NaN, tolerance: tol, problem: 'no probe shape the original region accepts' };
  const shape = specs.length ? [...specs[0]!.dims] : [];
  let maxAbs = 0, maxRel = 0, scale = 0;
  try {
    const afterOut = runAll(c.after, probeSets);
    for (let p = 0; p < probes; p++) {
      const before = beforeOut[p]!, after = afterOut[p]!;
      for (const o of c.before.outputs) {
        const a = before.get(o.name), b = after.get(o.name);
        if (!a || !b || !sameDims(a.dims, b.dims)) {
          return { passed: false, maxAbs: Infinity, maxRel: Infinity, shape, scale, tolerance: tol, problem: `region output '${o.name}' missing or reshaped after the fold` };
        }
        const rel = computeMetrics(b.data, a.data).maxRel;
        if (!(rel <= maxRel)) maxRel = Number.isNaN(rel) ? Infinity : rel;
        for (let i = 0; i < a.data.length; i++) {
          const d = Math.abs(a.data[i]! - b.data[i]!);
          if (!(d <= maxAbs)) maxAbs = Number.isNaN(d) ? Infinity : d;
          scale = Math.max(scale, Math.abs(a.data[i]!));
        }
      }
    }
  } catch (e) {
    return { passed: false, maxAbs: NaN, maxRel: NaN, shape, scale, tolerance: tol, problem: (e as Error).message.split('\n')[0] };
  }
  return { passed: maxAbs <= tol * Math.max(scale, 1e-12), maxAbs, maxRel, shape, scale, tolerance: tol };
}
