// After folding: drop initializers and Constant nodes nobody reads any more, and the value_info of values
// that no longer exist. Graph inputs and outputs, metadata, doc strings and opsets are left as they were;
// only what a fold released is considered, so unused tensors the model already had stay.
import type { Graph, Node, Tensor } from '../graph/ir.js';
import { touch } from '../graph/edit.js';
import type { EditableUseDef } from '../graph/usedef.js';
import type { Scope } from './scope.js';
import type { FoldContext } from './context.js';

/**
 * With the fold driver's context (its scopes' indexes current, and the names each graph's folds released, see
 * LiveScope), the clean-up looks up the released names instead of rebuilding every index, and tells the indexes
 * what it dropped. A name is looked for in every graph, as a body's fold may release a weight of the graph around it.
 */
export function cleanUp(goneValues: readonly string[], ctx: FoldContext): void {
  const lives = [...ctx.live!.values()];
  let releasedCount = 0;
  for (const l of lives) releasedCount += l.released.length;
  // the tensors to drop, and their names (initializer names are unique in a valid graph; the index is told at once,
  // so a tensor comes here once)
  const dropInits = new Map<Graph, { list: Tensor[]; names: string[] }>();
  const dropNodes = new Map<Graph, Set<Node>>();
  const gone = [...goneValues];
  let releasedSet: Set<string> | undefined;
  const unread = (ud: EditableUseDef, v: string) => ud.readerCount(v) === 0 && !ud.isGraphOutput(v) && !ud.isGraphInput(v);
  // the names of values that no longer exist matter only to graphs that declare value_info
  const withInfos = lives.some((l) => l.scope.graph.valueInfo.length > 0);
  const dropInit = (s: Scope, ud: EditableUseDef, t: Tensor) => {
    // the driver's index is told at once, while the name was just looked up (a lookup later would hash it again)
    ud.removeInitializer(t.name);
    let d = dropInits.get(s.graph);
    if (!d) dropInits.set(s.graph, d = { list: [], names: [] });
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
  const consider = (s: Scope, ud: EditableUseDef, v: string) => {
    if (!ud.defines(v) || !unread(ud, v)) return;
    const t = ud.initializer(v);
    if (t) dropInit(s, ud, t);
    const p = ud.producer(v);
    if (p && p.opType === 'Constant' && p.outputs[0] === v) dropConstant(s, p, v);
  };
  for (const live of lives) {
    const s = live.scope, ud = live.ud;
    if (releasedCount < s.graph.initializers.length + s.graph.nodes.length) {
      // fewer names released than the graph holds: look each one up (a name this graph's folds released by the
      // number its index gave it then: not hashed again)
      for (const by of lives) {
        for (let i = 0; i < by.released.length; i++) {
          const v = by.released[i]!;
          if (by === live && by.releasedIds[i]! >= 0) ud.remember(v, by.releasedIds[i]!);
          consider(s, ud, v);
        }
      }
      continue;
    }
    const isReleased = releasedSet ??= new Set(lives.flatMap((l) => l.released));
    for (const t of s.graph.initializers) if (isReleased.has(t.name) && unread(ud, t.name)) dropInit(s, ud, t);
    for (const n of s.graph.nodes) {
      const v = n.outputs[0];
      if (n.opType === 'Constant' && v && isReleased.has(v) && unread(ud, v)) dropConstant(s, n, v);
    }
  }
  for (const [g, d] of dropInits) { g.initializers = without(g.initializers, d.list); touch(g); }
  for (const [g, nodes] of dropNodes) { g.nodes = g.nodes.filter((n) => !nodes.has(n)); touch(g); }
  const goneSet = gone.length && withInfos ? new Set(gone) : undefined;
  if (goneSet) {
    for (const { scope: s } of lives) {
      const g = s.graph;
      if (!g.valueInfo.length) continue;
      const droppedNames = new Set(dropInits.get(g)?.names);
      const defined = (v: string) => (s.ud.producer(v) !== undefined && !dropNodes.get(g)?.has(s.ud.producer(v)!))
        || (s.ud.initializer(v) !== undefined && !droppedNames.has(v)) || s.ud.isGraphInput(v);
      const keep = g.valueInfo.filter((vi) => !goneSet.has(vi.name) || defined(vi.name));
      if (keep.length !== g.valueInfo.length) { g.valueInfo = keep; touch(g); }
    }
  }
  for (const [g, nodes] of dropNodes) {
    const ud = ctx.live!.get(g)!.ud;
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
