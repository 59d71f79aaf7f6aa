// The neighbourhood of each normalization, for reports that draw it: the nodes within two hops of the norm
// (its producer, the norm, every reader, and their neighbours) with op type, ledger name and whether the node
// pads its input; for a fold, also the folded model's nodes within two hops of the layer it went into. Only
// nodes are drawn (weights and graph inputs are not), and a very wide neighbourhood is cut at MAX_NODES.
import type { Model, Node } from '../graph/ir.js';
import { attrInts, attrString } from '../graph/ir.js';
import { buildScopes, labelOf, type Scope } from './scope.js';

export interface SketchNode {
  /** Ledger name (node name, or op#index when unnamed). */
  id: string;
  op: string;
  /** 'norm': the normalization; 'target': the layer it folds into; 'other': a neighbour. */
  role: 'norm' | 'target' | 'other';
  /** Pads its input (Conv/ConvTranspose/pooling with pads or auto_pad SAME_*, or a Pad node). */
  padded?: boolean;
}

export interface SketchEdge { from: string; to: string; value: string }

export interface SketchView {
  nodes: SketchNode[];
  edges: SketchEdge[];
  /** Neighbours left out because the drawing reached MAX_NODES. */
  omitted: number;
}

export interface Sketch {
  /** The normalization (ledger name) and its graph path, as in the ledger. */
  node: string;
  graph: string;
  before: SketchView;
  /** Around the target layer in the folded model (folds only; with --clone-shared around the copy that was folded). */
  after?: SketchView;
}

export const MAX_NODES = 24;
const HOPS = 2;

const PADDING_OPS = new Set(['Conv', 'ConvTranspose', 'AveragePool', 'MaxPool', 'LpPool']);

export function padsInput(n: Node): boolean {
  if (n.opType === 'Pad') return true;
  if (!PADDING_OPS.has(n.opType)) return false;
  const autoPad = attrString(n, 'auto_pad', 'NOTSET');
  return autoPad.startsWith('SAME') || (attrInts(n, 'pads') ?? []).some((p) => p !== 0);
}

/** Nodes within HOPS of `centre` (readers and producers alike), in graph order, at most MAX_NODES. */
function viewAround(scope: Scope, centre: Node, norm: string, target: string | null): SketchView {
  const ud = scope.ud;
  const neighbours = (n: Node): Node[] => {
    const out: Node[] = [];
    for (const v of n.inputs) { const p = v ? ud.producer(v) : undefined; if (p) out.push(p); }
    for (const v of n.outputs) if (v) out.push(...ud.consumers(v));
    return out;
  };
  const seen = new Set<Node>([centre]);
  const left = new Set<Node>();
  let frontier = [centre];
  for (let hop = 0; hop < HOPS; hop++) {
    const next: Node[] = [];
    for (const n of frontier) {
      for (const m of neighbours(n)) {
        if (seen.has(m)) continue;
        if (seen.size >= MAX_NODES) { left.add(m); continue; }
        seen.add(m);
        next.push(m);
      }
    }
    frontier = next;
  }
  const order = scope.graph.nodes.filter((n) => seen.has(n));
  const nodes = order.map((n): SketchNode => {
    const id = labelOf(scope, n);
    return { id, op: n.opType, role: id === norm ? 'norm' : id === target ? 'target' : 'other', ...(padsInput(n) ? { padded: true } : {}) };
  });
  const edges: SketchEdge[] = [];
  for (const n of order) {
    for (const v of n.outputs) {
      if (!v) continue;
      for (const c of ud.consumers(v)) if (seen.has(c)) edges.push({ from: labelOf(scope, n), to: labelOf(scope, c), value: v });
    }
  }
  return { nodes, edges, omitted: left.size };
}

function findNode(scope: Scope, label: string): Node | undefined {
  return scope.graph.nodes.find((n) => labelOf(scope, n) === label);
}

/**
 * One sketch per entry. `before` is the model the entries were judged on; `after` the folded model (fold only),
 * where a folded entry's target is found by its name (an unnamed target keeps no stable label, so it gets none);
 * a fold that rewrote a --clone-shared copy is drawn around the copy (the target is left as it was).
 */
export function sketches(
  before: Model,
  entries: ReadonlyArray<{ node: string; graph: string; status: string; target: string | null; copy?: string }>,
  after?: Model,
): Sketch[] {
  const sb = buildScopes(before);
  const sa = after ? buildScopes(after) : [];
  const out: Sketch[] = [];
  for (const e of entries) {
    const scope = sb.find((s) => s.path === e.graph);
    const norm = scope && findNode(scope, e.node);
    if (!scope || !norm) continue;
    const sketch: Sketch = { node: e.node, graph: e.graph, before: viewAround(scope, norm, e.node, e.target) };
    if (e.status === 'folded' && e.target !== null) {
      const scopeA = sa.find((s) => s.path === e.graph);
      const rewritten = e.copy ?? e.target;
      const t = scopeA?.graph.nodes.find((n) => n.name !== '' && n.name === rewritten);
      if (scopeA && t) sketch.after = viewAround(scopeA, t, e.node, rewritten);
    }
    out.push(sketch);
  }
  return out;
}
