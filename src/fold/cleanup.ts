// After folding: drop initializers and Constant nodes nobody reads any more, and the value_info of values
// that no longer exist. Graph inputs and outputs, metadata, doc strings and opsets are left as they were;
// only what a fold released is considered, so unused tensors the model already had stay.
import type { Model } from '../graph/ir.js';
import { touch } from '../graph/edit.js';
import { buildScopes, homeOf, type Scope } from './scope.js';

export function cleanUp(model: Model, released: Set<string>, gone: Set<string>): void {
  const scopes = buildScopes(model);
  for (const name of released) {
    const home = scopes.map((s) => homeOf(s, name)).find((s): s is Scope => s !== undefined && s.ud.consumers(name).length === 0 && !s.ud.isGraphOutput(name) && !s.ud.isGraphInput(name));
    if (!home) continue;
    const g = home.graph;
    if (home.ud.initializer(name)) {
      g.initializers = g.initializers.filter((t) => t.name !== name);
      gone.add(name);
      touch(g);
    } else {
      const p = home.ud.producer(name);
      if (p && p.opType === 'Constant') {
        g.nodes = g.nodes.filter((n) => n !== p);
        gone.add(name);
        touch(g);
      }
    }
  }
  if (!gone.size) return;
  for (const s of buildScopes(model)) {
    const g = s.graph;
    const defined = (v: string) => s.ud.producer(v) !== undefined || s.ud.initializer(v) !== undefined || s.ud.isGraphInput(v);
    const keep = g.valueInfo.filter((vi) => !gone.has(vi.name) || defined(vi.name));
    if (keep.length !== g.valueInfo.length) { g.valueInfo = keep; touch(g); }
  }
}
