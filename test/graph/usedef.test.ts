// The use-def index answers as a plain scan of the graph does, whether it is built from the name ids validation
// left behind (the first index of a graph just read) or by hashing the names itself (after any edit).
import { describe, expect, it } from 'vitest';
import { parseModel } from '../../src/onnx/read.js';
import { buildUseDef, editableUseDef, type UseDef } from '../../src/graph/usedef.js';
import { validateModel } from '../../src/graph/validate.js';
import type { Graph, Model } from '../../src/graph/ir.js';
import { hasSubgraphs, subgraphsOf } from '../../src/graph/ir.js';
import { randomCase } from '../fold/random-graphs.js';
import { rng } from '../helpers/build.js';

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
  it('answers as a scan does, built from validation\'s ids and built afresh (seeded random graphs)', () => {
    for (let seed = 1; seed <= 30; seed++) {
      const fresh = read(seed).graph;
      expectAnswersOf(buildUseDef(fresh), fresh); // first index: validation's ids, when the graph has no bodies
      expectAnswersOf(buildUseDef(fresh), fresh); // second: hashed again
      const m = read(seed);
      expectAnswersOf(editableUseDef(m.graph), m.graph);
    }
  });

  it('does not take validation\'s ids for a graph edited since (in place or not)', () => {
    const edits: Array<[string, (g: Graph, r: () => number) => void]> = [
      ['an input renamed in place', (g, r) => {
        const n = g.nodes.filter((x) => x.inputs.length > 1)[Math.floor(r() * 3)]!;
        n.inputs[1] = g.nodes[0]!.outputs[0]!;
      }],
      ['an input moved to the next node (same names in the same order overall)', (g) => {
        const j = g.nodes.findIndex((x, i) => x.inputs.length > 1 && i + 1 < g.nodes.length);
        const a = g.nodes[j]!, b = g.nodes[j + 1]!;
        b.inputs = [a.inputs[a.inputs.length - 1]!, ...b.inputs];
        a.inputs = a.inputs.slice(0, -1);
      }],
      ['an output renamed', (g) => { const n = g.nodes[0]!; n.outputs = ['renamed', ...n.outputs.slice(1)]; }],
      ['an initializer dropped', (g) => { g.initializers.pop(); }],
      ['an initializer renamed', (g) => { g.initializers[0]!.name = 'other'; }],
      ['a node dropped', (g) => { g.nodes.pop(); }],
      ['a graph input added', (g) => { g.inputs.push({ name: 'extra', docString: '', extra: [] }); }],
    ];
    for (const [what, edit] of edits) {
      for (let seed = 1; seed <= 10; seed++) {
        const m = read(seed);
        if (m.graph.nodes.some(hasSubgraphs)) continue;
        edit(m.graph, rng(seed));
        try {
          expectAnswersOf(buildUseDef(m.graph), m.graph);
        } catch (e) {
          throw new Error(`${what}, seed ${seed}: ${(e as Error).message}`);
        }
      }
    }
  });

  it('validating again after edits hands over the new ids', () => {
    for (let seed = 1; seed <= 10; seed++) {
      const m = read(seed);
      if (m.graph.nodes.some(hasSubgraphs)) continue;
      buildUseDef(m.graph); // takes the ids of the read
      const last = m.graph.nodes[m.graph.nodes.length - 1]!;
      m.graph.nodes.push({ ...last, name: 'copy', outputs: last.outputs.map((o) => `${o}.copy`), attributes: [...last.attributes] });
      validateModel(m);
      expectAnswersOf(buildUseDef(m.graph), m.graph);
    }
  });
});
