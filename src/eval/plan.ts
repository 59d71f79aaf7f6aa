// What an evaluation of a graph needs to know before its first step, worked out once per graph: every value name
// numbered (a slot), so a run holds its values in an array indexed by slot instead of maps keyed by name; the
// slots each node reads and writes; the last node reading each slot; and what to drop after each node. A graph
// of 10^5 nodes costs a few hundred thousand map operations to plan and none per step.
//
// A plan is kept per graph object and reused while the graph still matches it (checked name by name before
// each use, which is cheap next to planning): the runs of a check (probes, both arithmetics) and the estimate
// before them share one.
import { subgraphsOf, type Graph, type Node, type Tensor } from '../graph/ir.js';
import { nameTable } from '../graph/names.js';
import { keptIds } from '../graph/kept-ids.js';
import type { Kernel } from './value.js';

/** Slot by value name (undefined: the graph never mentions the name). */
export interface SlotLookup {
  get(name: string): number | undefined;
}

export interface Plan {
  graph: Graph;
  /** Slot of every value name the graph's nodes, initializers and outputs mention. */
  slotOf: SlotLookup;
  /** Name of each slot. */
  names: string[];
  /** The initializer a slot holds, if any (the last of that name, as a map by name would keep). */
  init: Array<Tensor | undefined>;
  /** 1 for slots that are graph outputs (never dropped). */
  keep: Uint8Array;
  /** Index of the last node that reads each slot (its subgraphs' reads included), -1 when none does. */
  lastUse: Int32Array;
  /** Input slots of node i: inSlot[inStart[i] .. inStart[i + 1]), -1 for an omitted optional input (''). */
  inStart: Int32Array;
  inSlot: Int32Array;
  /** Output slots of node i, likewise (-1 for ''). */
  outStart: Int32Array;
  outSlot: Int32Array;
  /** Slots to drop after node i has run (values it was the last reader of, outputs nothing reads), likewise. */
  dropStart: Int32Array;
  dropSlot: Int32Array;
  /** Kernel found for each node and the opset it was found for (filled by the first run that steps it). */
  kernel: Array<Kernel | undefined>;
  kernelOpset: Int32Array;
  // what the plan was made from, to check it still matches the graph
  nodes: Node[];
  initializers: Tensor[];
  outputNames: string[];
  /** Indices of nodes with subgraphs, whose reads from this scope the check works out again. */
  withBodies: number[];
  bodyReads: string[][];
}

/** Names a subgraph reads from its enclosing scopes (anything it uses but does not define itself). */
export function outerReads(g: Graph, into: Set<string>): void {
  const defined = new Set<string>();
  for (const i of g.inputs) defined.add(i.name);
  for (const t of g.initializers) defined.add(t.name);
  for (const n of g.nodes) {
    for (const i of n.inputs) if (i && !defined.has(i)) into.add(i);
    for (const sg of subgraphsOf(n)) {
      const inner = new Set<string>();
      outerReads(sg, inner);
      for (const i of inner) if (!defined.has(i)) into.add(i);
    }
    for (const o of n.outputs) if (o) defined.add(o);
  }
  for (const o of g.outputs) if (!defined.has(o.name)) into.add(o.name);
}

/** What a node's subgraphs read from this scope that its own inputs do not name, in first-read order. */
function bodyReadsOf(n: Node): string[] {
  const s = new Set<string>();
  for (const g of subgraphsOf(n)) outerReads(g, s);
  const own = new Set(n.inputs);
  return [...s].filter((x) => !own.has(x));
}

const hasBody = (n: Node): boolean => {
  for (const a of n.attributes) if (a.value.type === 'GRAPH' || a.value.type === 'GRAPHS') return true;
  return false;
};

/**
 * Slots by name: a flat table of names for a large graph (graph/names.ts; a Map of 10^5 strings costs several
 * times more to fill), a scan of the few names for a proof region's handful of nodes (no table to allocate).
 */
function slotTable(g: Graph, names: string[]): { slot: (name: string) => number; slotOf: SlotLookup } {
  let bound = g.initializers.length + g.outputs.length;
  for (const node of g.nodes) bound += node.inputs.length + node.outputs.length;
  if (bound <= SMALL_SLOTS) {
    const find = (name: string): number => {
      for (let i = 0; i < names.length; i++) if (names[i] === name) return i;
      return -1;
    };
    return {
      slot: (name) => { const s = find(name); if (s >= 0) return s; names.push(name); return names.length - 1; },
      slotOf: { get: (name) => { const s = find(name); return s < 0 ? undefined : s; } },
    };
  }
  // (sized for the names a graph defines, each read names one of those; more, e.g. outer names, grow the table)
  let distinct = g.initializers.length + g.inputs.length + g.outputs.length + 16;
  for (const node of g.nodes) distinct += node.outputs.length;
  bound = Math.min(bound, distinct);
  let table = nameTable(bound);
  const slot = (name: string): number => {
    if (names.length === bound) {
      // (a body's reads can name more than the nodes do: move to a larger table)
      bound *= 2;
      const bigger = nameTable(bound);
      for (const n of names) bigger.add(n);
      table = bigger;
    }
    const s = table.add(name);
    if (s === names.length) names.push(name);
    return s;
  };
  // (asked for a name that is no string, as a map would be, it answers undefined)
  return { slot, slotOf: { get: (name) => { const s = typeof name === 'string' ? table.id(name) : -1; return s < 0 ? undefined : s; } } };
}

/** Up to this many name mentions, a plan finds slots by scanning its names. */
const SMALL_SLOTS = 24;

/**
 * The slots of a graph whose names validation numbered and kept (graph/kept-ids.ts), while the graph is exactly as
 * validated: the kept ids are the slots, so no name is hashed again (a graph just read, or never edited since: the
 * original model and the written one read back, in a check). Undefined when there are none, or when a body reads a
 * name the kept table does not hold.
 */
function keptSlots(g: Graph): { names: string[]; slot: (name: string) => number; slotOf: SlotLookup; inStart: Int32Array; inSlot: Int32Array; outStart: Int32Array; outSlot: Int32Array; bodyReads: Map<number, string[]> } | undefined {
  const k = keptIds(g);
  if (!k) return undefined;
  const table = k.table, count = table.size;
  const id = (name: string): number => { const s = typeof name === 'string' ? table.id(name) : -1; return s < count ? s : -1; };
  // what each body reads from here, worked out once (build takes it from here)
  const bodyReads = new Map<number, string[]>();
  for (let i = 0; i < g.nodes.length; i++) {
    if (!hasBody(g.nodes[i]!)) continue;
    const reads = bodyReadsOf(g.nodes[i]!);
    if (reads.some((x) => id(x) < 0)) return undefined;
    bodyReads.set(i, reads);
  }
  for (const o of g.outputs) if (id(o.name) < 0) return undefined;
  const names = new Array<string>(count);
  for (let s = 0; s < count; s++) names[s] = table.nameOf(s);
  return {
    names, slot: id, slotOf: { get: (name) => { const s = id(name); return s < 0 ? undefined : s; } },
    inStart: k.readStart, inSlot: k.readIds, outStart: k.outStart, outSlot: k.outIds, bodyReads,
  };
}

function build(g: Graph): Plan {
  const nodes = g.nodes;
  const n = nodes.length;
  const kept = n >= KEEP_PLAN_MIN_NODES ? keptSlots(g) : undefined;
  const names: string[] = kept?.names ?? [];
  const { slot, slotOf } = kept ?? slotTable(g, names);
  // (filled up front when the slots are known: slots far apart would make a sparse array, slow to read)
  const init: Array<Tensor | undefined> = kept ? new Array<Tensor | undefined>(names.length).fill(undefined) : [];
  for (const t of g.initializers) init[slot(t.name)] = t;
  let nIn = 0, nOut = 0;
  for (const node of nodes) { nIn += node.inputs.length; nOut += node.outputs.length; }
  const inStart = kept?.inStart ?? new Int32Array(n + 1), inSlot = kept?.inSlot ?? new Int32Array(nIn);
  const outStart = kept?.outStart ?? new Int32Array(n + 1), outSlot = kept?.outSlot ?? new Int32Array(nOut);
  const withBodies: number[] = [];
  const bodyReads: string[][] = [];
  const extraReads: Array<number[] | undefined> = [];
  let pi = 0, po = 0;
  for (let i = 0; i < n; i++) {
    const node = nodes[i]!;
    if (!kept) {
      inStart[i] = pi;
      for (const x of node.inputs) inSlot[pi++] = x === '' ? -1 : slot(x);
      outStart[i] = po;
      for (const x of node.outputs) outSlot[po++] = x === '' ? -1 : slot(x);
    }
    if (hasBody(node)) {
      const reads = kept?.bodyReads.get(i) ?? bodyReadsOf(node);
      withBodies.push(i);
      bodyReads.push(reads);
      extraReads[i] = reads.map(slot);
    }
  }
  if (!kept) {
    inStart[n] = pi;
    outStart[n] = po;
  }
  const outputNames = g.outputs.map((o) => o.name);
  for (const o of outputNames) slot(o);
  const count = names.length;
  init.length = count;
  const keep = new Uint8Array(count);
  for (const o of outputNames) keep[slot(o)] = 1;
  const lastUse = new Int32Array(count).fill(-1);
  for (let i = 0; i < n; i++) {
    for (let k = inStart[i]!; k < inStart[i + 1]!; k++) { const s = inSlot[k]!; if (s >= 0) lastUse[s] = i; }
    const extra = extraReads[i];
    if (extra) for (const s of extra) lastUse[s] = i;
  }
  // after node i: its outputs nothing reads, then the values i was the last reader of (graph outputs stay)
  // (at most one entry per input, output and body read: written straight into a typed array of that size)
  let dropBound = nIn + nOut;
  for (const r of bodyReads) dropBound += r.length;
  const dropStart = new Int32Array(n + 1);
  const drops = new Int32Array(dropBound);
  let nd = 0;
  for (let i = 0; i < n; i++) {
    dropStart[i] = nd;
    for (let k = outStart[i]!; k < outStart[i + 1]!; k++) { const s = outSlot[k]!; if (s >= 0 && !keep[s] && lastUse[s] === -1) drops[nd++] = s; }
    for (let k = inStart[i]!; k < inStart[i + 1]!; k++) { const s = inSlot[k]!; if (s >= 0 && lastUse[s] === i && !keep[s]) drops[nd++] = s; }
    const extra = extraReads[i];
    if (extra) for (const s of extra) if (lastUse[s] === i && !keep[s]) drops[nd++] = s;
  }
  dropStart[n] = nd;
  return {
    graph: g, slotOf, names, init, keep, lastUse, inStart, inSlot, outStart, outSlot, dropStart, dropSlot: nd === dropBound ? drops : drops.slice(0, nd),
    kernel: new Array(n), kernelOpset: new Int32Array(n).fill(-1),
    // what matches() compares with; a small graph's plan is never kept, so never compared
    nodes: n >= KEEP_PLAN_MIN_NODES ? [...nodes] : nodes, initializers: n >= KEEP_PLAN_MIN_NODES ? [...g.initializers] : g.initializers,
    outputNames, withBodies, bodyReads,
  };
}

/** Whether `p` still describes `g` exactly: the same nodes reading and writing the same names, the same initializers and outputs. */
function matches(p: Plan, g: Graph): boolean {
  const nodes = g.nodes;
  if (nodes.length !== p.nodes.length || g.initializers.length !== p.initializers.length || g.outputs.length !== p.outputNames.length) return false;
  const { names, inStart, inSlot, outStart, outSlot } = p;
  for (let i = 0; i < nodes.length; i++) {
    const node = nodes[i]!;
    if (node !== p.nodes[i]) return false;
    const ins = node.inputs, outs = node.outputs;
    const a = inStart[i]!, b = outStart[i]!;
    if (ins.length !== inStart[i + 1]! - a || outs.length !== outStart[i + 1]! - b) return false;
    for (let k = 0; k < ins.length; k++) { const s = inSlot[a + k]!; if (ins[k] !== (s < 0 ? '' : names[s])) return false; }
    for (let k = 0; k < outs.length; k++) { const s = outSlot[b + k]!; if (outs[k] !== (s < 0 ? '' : names[s])) return false; }
  }
  for (let i = 0; i < g.initializers.length; i++) {
    const t = g.initializers[i]!;
    if (t !== p.initializers[i] || p.init[p.slotOf.get(t.name) ?? -1] !== t) return false;
  }
  for (let i = 0; i < g.outputs.length; i++) if (g.outputs[i]!.name !== p.outputNames[i]) return false;
  // bodies: which nodes have them, and what they read from here
  let j = 0;
  for (let i = 0; i < nodes.length; i++) {
    if (!hasBody(nodes[i]!)) continue;
    if (p.withBodies[j] !== i) return false;
    const now = bodyReadsOf(nodes[i]!), then = p.bodyReads[j]!;
    if (now.length !== then.length || now.some((x, k) => x !== then[k])) return false;
    j++;
  }
  return j === p.withBodies.length;
}

const plans = new WeakMap<Graph, Plan>();

/**
 * Graphs with fewer nodes are planned afresh each time (a fold's proof region: planning it costs less than the
 * collector's work for a weak entry per region); runs of one such graph side by side share one plan (lockstep.ts).
 */
export const KEEP_PLAN_MIN_NODES = 64;

// Inside withGraphsHeldStill, a plan made or checked once is trusted for the rest of that call.
let heldDepth = 0;
let heldSession = 0;
const trustedIn = new WeakMap<Plan, number>();

/**
 * Run `fn`, which evaluates graphs without editing them (a comparison: estimate, probes, coverage walk): each
 * graph's plan is made or checked once and then reused as it is.
 */
export function withGraphsHeldStill<T>(fn: () => T): T {
  if (heldDepth++ === 0) heldSession++;
  try {
    return fn();
  } finally {
    heldDepth--;
  }
}

/** Inside withGraphsHeldStill: a number naming the current call (results derived from a graph may be kept for it), else undefined. */
export function heldStillCall(): number | undefined {
  return heldDepth > 0 ? heldSession : undefined;
}

/** The plan of `g`: the one made before if the graph still matches it, else a new one. */
export function planOf(g: Graph): Plan {
  if (g.nodes.length < KEEP_PLAN_MIN_NODES) return build(g);
  const p = plans.get(g);
  if (p && heldDepth > 0 && trustedIn.get(p) === heldSession) return p;
  const plan = p && matches(p, g) ? p : build(g);
  if (plan !== p) plans.set(g, plan);
  if (heldDepth > 0) trustedIn.set(plan, heldSession);
  return plan;
}
