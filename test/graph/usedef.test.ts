// The use-def index answers as a plain scan of the graph does (seeded random graphs, bodies included).
import { describe, expect, it } from 'vitest';
import { parseModel } from '../../src/onnx/read.js';
import { buildUseDef, editableUseDef, type UseDef } from '../../src/graph/usedef.js';
import type { Graph, Model } from '../../src/graph/ir.js';
import { hasSubgraphs, subgraphsOf } from '../../src/graph/ir.js';
import { randomCase } from '../fold/random-graphs.js';

/** Every value name of a graph, and names that are none. */
function namesOf(g: Graph): string[] {
  const s = new Set<string>(['', 'no such value']);
  for (const v of [...g.inputs, ...g.outputs]) s.add(v.name);
  for (const t of g.initializers) s.add(t.name);
  for (const n of g.nodes) for (const v of [...n.inputs, ...n.outputs]) s.add(v);
  return [...s];
}

/** What the index must say, by scanning (body reads count for the node owning the body). */
function expectAnswersOf(ud: UseDef, g: Graph): void {
  const bodyRefs = (n: Graph['nodes'][number]): Set<string> => {
    const out = new Set<string>();
    const walk = (sg: Graph, outer: Set<string>) => {
      const defined = new Set<string>([...sg.inputs.map((v) => v.name), ...sg.initializers.map((t) => t.name)]);
      for (const m of sg.nodes) for (const o of m.outputs) if (o) defined.add(o);
      for (const m of sg.nodes) {
        for (const i of m.inputs) if (i && !defined.has(i)) out.add(i);
        for (const b of subgraphsOf(m)) walk(b, defined);
      }
      for (const o of sg.outputs) if (!defined.has(o.name)) out.add(o.name);
      void outer;
    };
    for (const sg of subgraphsOf(n)) walk(sg, new Set());
    return out;
  };
  for (const v of namesOf(g)) {
    const producer = g.nodes.filter((n) => v !== '' && n.outputs.includes(v)).at(-1);
    const readers = g.nodes.filter((n) => v !== '' && (n.inputs.includes(v) || (hasSubgraphs(n) && bodyRefs(n).has(v))));
    const init = g.initializers.filter((t) => t.name === v).at(-1);
    expect(ud.producer(v), `producer of '${v}'`).toBe(producer);
    expect(ud.consumers(v), `readers of '${v}'`).toEqual(readers);
    expect(ud.initializer(v), `initializer '${v}'`).toBe(init);
    expect(ud.isGraphOutput(v)).toBe(v !== '' && g.outputs.some((o) => o.name === v));
    expect(ud.isGraphInput(v)).toBe(v !== '' && g.inputs.some((o) => o.name === v));
    expect(ud.defines(v)).toBe(producer !== undefined || init !== undefined || (v !== '' && g.inputs.some((o) => o.name === v)));
  }
}

const read = (seed: number): Model => parseModel(randomCase(seed).bytes, '/x', `seed ${seed}`);

describe('use-def index', () => {
  it('answers as a scan does (seeded random graphs)', () => {
    for (let seed = 1; seed <= 30; seed++) {
      const m = read(seed);
      expectAnswersOf(buildUseDef(m.graph), m.graph);
      expectAnswersOf(editableUseDef(m.graph), m.graph);
    }
  });
});
