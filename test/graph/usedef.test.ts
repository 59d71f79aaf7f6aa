// The use-def index answers as a plain scan of the graph does (seeded random graphs, bodies included).
import { describe, expect, it } from 'vitest';
import { parseModel } from '../../src/onnx/read.js';
import { buildUseDef, editableUseDef, type UseDef } from '../../src/graph/usedef.js';
import type { Graph, Model } from '../../src/graph/ir.js';
import { hasSubgraphs, subgraphsOf } from '../../src/graph/ir.js';
import { randomCase } from '../fold/random-graphs.js';
import { keptIds } from '../../src/graph/kept-ids.js';
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
  it('answers as a scan does (seeded random graphs)', () => {
    for (let seed = 1; seed <= 30; seed++) {
      const m = read(seed);
      expectAnswersOf(buildUseDef(m.graph), m.graph);
      expectAnswersOf(editableUseDef(m.graph), m.graph);
    }
  });
});

describe('editable use-def index', () => {
  // Lookups remember the ids of the last names found (src/graph/usedef.ts): a name asked for before it exists
  // must be found once added, and a remembered name must give the index's current answer after each edit.
  it('answers as a scan does between edits, names asked for before and after they exist', () => {
    for (let seed = 1; seed <= 12; seed++) {
      const m = read(seed);
      const g = m.graph;
      const ud = editableUseDef(g);
      const some = namesOf(g).filter((v) => v !== '' && v !== 'no such value');
      for (let k = 0; k < 6; k++) {
        const out = `added.${k}`, w = `added.w.${k}`;
        const src = some[(k * 7) % some.length]!;
        // asked for before they exist, with known names between (what the lookup remembers)
        expect(ud.producer(out)).toBeUndefined();
        expect(ud.initializer(w)).toBeUndefined();
        ud.consumers(src);
        const n = { name: `n.${k}`, opType: 'Add', domain: '', inputs: [src, w], outputs: [out], attributes: [], docString: '', extra: [] };
        g.nodes = [...g.nodes, n];
        const t = { name: w, dims: [1], dataType: 1, storage: { kind: 'raw' as const, bytes: new Uint8Array(4) }, docString: '', extra: [] };
        g.initializers = [...g.initializers, t];
        ud.addNode(n);
        ud.addInitializer(t);
        expect(ud.producer(out)).toBe(n);
        expect(ud.initializer(w)).toBe(t);
        expect(ud.consumers(w)).toEqual([n]);
        if (k % 2 === 1) {
          // and an initializer gone again while its name is among the remembered ones
          g.initializers = g.initializers.filter((x) => x !== t);
          g.nodes = g.nodes.filter((x) => x !== n);
          ud.removeNode(n);
          ud.removeInitializer(w);
          expect(ud.initializer(w)).toBeUndefined();
          expect(ud.producer(out)).toBeUndefined();
        }
      }
      ud.settle();
      expectAnswersOf(ud, g);
    }
  });
});

describe('ids kept from validation (src/graph/kept-ids.ts)', () => {
  // The index takes the name ids validation found only while the graph is exactly as validated; each kind of
  // in-place edit below must make it build its own, and answer as a scan of the edited graph does.
  const edits: Array<[string, (g: Graph, r: () => number) => void]> = [
    ['an input replaced in place', (g, r) => {
      const some = g.nodes.filter((x) => x.inputs.length > 0 && x.inputs[0] !== g.inputs[0]!.name);
      some[Math.floor(r() * some.length)]!.inputs[0] = g.inputs[0]!.name;
    }],
    ['an output renamed in place', (g) => { const n = g.nodes.find((x) => x.outputs[0])!; n.outputs[0] = 'renamed.out'; }],
    ['a node replaced by a copy', (g) => { const j = g.nodes.length >> 1; g.nodes[j] = { ...g.nodes[j]!, inputs: [...g.nodes[j]!.inputs] }; }],
    ['an input added to a node', (g) => { const n = g.nodes[0]!; n.inputs.push(g.inputs[0]!.name); }],
    ['an input and an output moved between neighbours', (g) => {
      const a = g.nodes.find((x, j) => x.inputs.length > 1 && g.nodes[j + 1] !== undefined);
      if (!a) { g.nodes.reverse(); return; }
      const b = g.nodes[g.nodes.indexOf(a) + 1]!;
      b.inputs.unshift(a.inputs.pop()!);
    }],
    ['the nodes reordered', (g) => { g.nodes.reverse(); }],
    ['an initializer renamed', (g) => { if (g.initializers[0]) g.initializers[0].name = 'renamed.init'; else g.nodes.reverse(); }],
    ['a graph output renamed', (g) => { g.outputs[0]!.name = g.inputs[0]!.name; }],
  ];
  it('answers for the graph as edited after validation, never from stale ids (seeded random graphs)', () => {
    let kept = 0;
    for (let seed = 1; seed <= 40; seed++) {
      const m = read(seed);
      if (keptIds(m.graph)) kept++;
      const r = rng(seed);
      const [what, edit] = edits[seed % edits.length]!;
      edit(m.graph, r);
      expect(keptIds(m.graph), what).toBeUndefined();
      expectAnswersOf(buildUseDef(m.graph), m.graph);
      expectAnswersOf(editableUseDef(m.graph), m.graph);
    }
    expect(kept).toBeGreaterThan(30); // graphs that read nothing from outside keep their ids
  });

  it('takes the kept ids while the graph is unchanged, with the same answers', () => {
    for (let seed = 1; seed <= 20; seed++) {
      const m = read(seed);
      if (!keptIds(m.graph)) continue;
      expectAnswersOf(buildUseDef(m.graph), m.graph);
      expect(keptIds(m.graph)).toBeDefined(); // taking them leaves them for the next index
    }
  });
});
