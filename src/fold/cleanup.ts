// After folding: drop initializers and Constant nodes nobody reads any more, and the value_info of values
// that no longer exist. Graph inputs and outputs, metadata, doc strings and opsets are left as they were;
// only what a fold released is considered, so unused tensors the model already had stay.
import type { Graph, Model, Node, Tensor } from '../graph/ir.js';
import { touch } from '../graph/edit.js';
import { buildScopes, type Scope } from './scope.js';
import type { FoldContext } from './context.js';

/**
 * With the fold driver's context (its scopes' indexes current), the clean-up looks up the released names instead
 * of rebuilding every index, and tells the indexes what it dropped.
 */
export function cleanUp(model: Model, released: readonly string[], goneValues: readonly string[], ctx?: FoldContext): void {
  const scopes = ctx?.live ? [...ctx.live.values()].map((l) => l.scope) : buildScopes(model);
  // the tensors to drop, and their names (initializer names are unique in a valid graph); `seen` keeps a tensor from
  // coming twice when there is no driver's index to tell
  const dropInits = new Map<Graph, { list: Tensor[]; seen?: Set<Tensor>; names: string[] }>();
  const dropNodes = new Map<Graph, Set<Node>>();
  const gone = [...goneValues];
  let releasedSet: Set<string> | undefined;
  // (the driver's indexes count readers without making the list)
  const readerCount = new Map(scopes.map((s) => {
    const live = ctx?.live?.get(s.graph);
    return [s, live ? live.ud.readerCount : (v: string) => s.ud.consumers(v).length] as const;
  }));
  const unread = (s: Scope, v: string) => readerCount.get(s)!(v) === 0 && !s.ud.isGraphOutput(v) && !s.ud.isGraphInput(v);
  // the names of values that no longer exist matter only to graphs that declare value_info
  const withInfos = scopes.some((s) => s.graph.valueInfo.length > 0);
  const dropInit = (s: Scope, t: Tensor) => {
    const ud = ctx?.live?.get(s.graph)?.ud;
    let d = dropInits.get(s.graph);
    if (!d) dropInits.set(s.graph, d = { list: [], seen: ud ? undefined : new Set(), names: [] });
    if (ud) {
      // the driver's index is told at once, while the name was just looked up (a lookup later would hash it again);
      // the name then defines no initializer, so a tensor comes here once (a set of 10^5 tensors grew slowly)
      ud.removeInitializer(t.name);
    } else {
      if (d.seen!.has(t)) return;
      d.seen!.add(t);
    }
    d.list.push(t);
    if (!withInfos) return;
    d.names.push(t.name);
    gone.push(t.name);
  };
  const dropConstant = (s: Scope, n: Node, v: string) => {
    if (!dropNodes.has(s.graph)) dropNodes.set(s.graph, new Set());
    dropNodes.get(s.graph)!.add(n);
    gone.push(v);
  };
  for (const s of scopes) {
    if (released.length < s.graph.initializers.length + s.graph.nodes.length) {
      // fewer names released than the graph holds: look each one up
      for (let i = 0; i < released.length; i++) {
        const v = released[i]!;
        if (!s.ud.defines(v) || !unread(s, v)) continue;
        const t = s.ud.initializer(v);
        if (t) dropInit(s, t);
        const p = s.ud.producer(v);
        if (p && p.opType === 'Constant' && p.outputs[0] === v) dropConstant(s, p, v);
      }
      continue;
    }
    const isReleased = releasedSet ??= new Set(released);
    for (const t of s.graph.initializers) if (isReleased.has(t.name) && unread(s, t.name)) dropInit(s, t);
    for (const n of s.graph.nodes) {
      const v = n.outputs[0];
      if (n.opType === 'Constant' && v && isReleased.has(v) && unread(s, v)) dropConstant(s, n, v);
    }
  }
  for (const [g, d] of dropInits) { g.initializers = without(g.initializers, d.list); touch(g); }
  for (const [g, nodes] of dropNodes) { g.nodes = g.nodes.filter((n) => !nodes.has(n)); touch(g); }
  const goneSet = gone.length && withInfos ? new Set(gone) : undefined;
  if (goneSet) {
    for (const s of scopes) {
      const g = s.graph;
      if (!g.valueInfo.length) continue;
      const droppedNames = new Set(dropInits.get(g)?.names);
      const defined = (v: string) => (s.ud.producer(v) !== undefined && !dropNodes.get(g)?.has(s.ud.producer(v)!))
        || (s.ud.initializer(v) !== undefined && !droppedNames.has(v)) || s.ud.isGraphInput(v);
      const keep = g.valueInfo.filter((vi) => !goneSet.has(vi.name) || defined(vi.name));
      if (keep.length !== g.valueInfo.length) { g.valueInfo = keep; touch(g); }
    }
  }
  if (!ctx?.live) return;
  for (const [g, nodes] of dropNodes) {
    const ud = ctx.live.get(g)!.ud;
    for (const n of nodes) { ud.removeNode(n); ctx.removedNodes.push(n); }
  }
}

/**
 * `all` without the tensors of `drop`. They mostly come in the order of the list (released fold by fold, in node
 * order): one pass that steps through both; a set of them only when that pass does not meet each one in turn.
 */
function without(all: readonly Tensor[], drop: readonly Tensor[]): Tensor[] {
  const out: Tensor[] = [];
  let j = 0;
  for (let i = 0; i < all.length; i++) {
    const t = all[i]!;
    if (j < drop.length && t === drop[j]) { j++; continue; }
    out.push(t);
  }
  if (j === drop.length) return out;
  const gone = new Set(drop);
  return all.filter((t) => !gone.has(t));
}
