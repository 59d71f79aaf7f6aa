// Which watched nodes sit upstream of each output (src/verify/status.ts), walked by slot, against a plain walk
// over names on seeded random graphs, some with an If whose branches read outer values and hold watched nodes.
import { describe, expect, it } from 'vitest';
import { rng } from '../helpers/build.js';
import { subgraphsOf, type Graph, type Node } from '../../src/graph/ir.js';
import { upstreamOfOutputs } from '../../src/verify/status.js';

const mk = (opType: string, name: string, inputs: string[], outputs: string[], attributes: Node['attributes'] = []): Node =>
  ({ name, opType, domain: '', inputs, outputs, attributes, docString: '', extra: [] });

function branch(name: string, reads: string[], out: string): Graph {
  return {
    name, inputs: [], initializers: [], valueInfo: [], docString: '', extra: [],
    nodes: [mk('Add', `${name}_add`, reads, [`${name}_t`]), mk('Relu', `${name}_relu`, [`${name}_t`], [out])],
    outputs: [{ name: out, docString: '', extra: [] }],
  };
}

function randomGraph(seed: number): Graph {
  const r = rng(seed);
  const pick = <T>(xs: T[]): T => xs[Math.floor(r() * xs.length)]!;
  const g: Graph = { name: 'g', nodes: [], initializers: [], inputs: [{ name: 'x', docString: '', extra: [] }], outputs: [], valueInfo: [], docString: '', extra: [] };
  const values = ['x'];
  const count = 20 + Math.floor(r() * 60);
  for (let i = 0; i < count; i++) {
    const out = `v${i}`;
    if (r() < 0.08 && values.length > 2) {
      const a = pick(values), b = pick(values);
      g.nodes.push(mk('If', `if${i}`, [pick(values)], [out], [
        { name: 'then_branch', value: { type: 'GRAPH', g: branch(`then${i}`, [a, b], `t${i}`) } },
        { name: 'else_branch', value: { type: 'GRAPH', g: branch(`else${i}`, [b, b], `e${i}`) } },
      ]));
    } else if (r() < 0.5) {
      g.nodes.push(mk('Add', `n${i}`, [pick(values), pick(values)], [out]));
    } else {
      g.nodes.push(mk('Relu', `n${i}`, [pick(values)], [out, ...(r() < 0.1 ? [`${out}_b`] : [])]));
    }
    values.push(out);
  }
  for (const o of new Set([values[values.length - 1]!, pick(values), pick(values), 'x'])) g.outputs.push({ name: o, docString: '', extra: [] });
  return g;
}

/** Everything a node reads, its bodies' reads from outside them included (over-approximated, as names). */
function reads(n: Node): string[] {
  const out = n.inputs.filter(Boolean);
  for (const sg of subgraphsOf(n)) for (const m of sg.nodes) out.push(...m.inputs.filter(Boolean), ...reads({ ...m, inputs: [] }));
  return out;
}

function plainUpstream(g: Graph, watch: ReadonlyMap<Node, string>): Map<string, string[]> {
  const producer = new Map<string, Node>();
  for (const n of g.nodes) for (const o of n.outputs) producer.set(o, n);
  const out = new Map<string, string[]>();
  for (const o of g.outputs) {
    const found = new Set<string>(), seen = new Set<Node>();
    const visit = (v: string) => {
      const p = producer.get(v);
      if (!p || seen.has(p)) return;
      seen.add(p);
      if (watch.has(p)) found.add(p.name);
      for (const sg of subgraphsOf(p)) for (const m of sg.nodes) if (watch.has(m)) found.add(m.name);
      for (const x of reads(p)) visit(x);
    };
    visit(o.name);
    out.set(o.name, [...found].sort());
  }
  return out;
}

describe('upstreamOfOutputs', () => {
  it('finds the watched nodes upstream of each output as a plain walk over names does (seeded graphs, If bodies)', () => {
    let withBodies = 0;
    for (let seed = 1; seed <= 40; seed++) {
      const g = randomGraph(seed);
      const r = rng(seed + 1000);
      const watch = new Map<Node, string>();
      for (const n of g.nodes) {
        if (r() < 0.3) watch.set(n, n.name);
        for (const sg of subgraphsOf(n)) { withBodies++; for (const m of sg.nodes) if (r() < 0.5) watch.set(m, m.name); }
      }
      const got = upstreamOfOutputs(g, watch);
      const want = plainUpstream(g, watch);
      expect(new Map([...got].map(([k, v]) => [k, [...v].map((n) => n.name).sort()])), `seed ${seed}`).toEqual(want);
    }
    expect(withBodies).toBeGreaterThan(0);
  });
});
