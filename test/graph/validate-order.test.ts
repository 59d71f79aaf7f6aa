// Validation sorts a graph only when its nodes are not already in an order where each reads values written before
// it; a node's subgraphs' reads of outer values count as its reads. Seeded graphs of Identity chains and If nodes
// whose branches read outer values, with the nodes shuffled (in order, out of order, and some with a cycle through
// a branch): validation must refuse exactly the graphs the topological sort finds a cycle in (Kahn's algorithm,
// src/graph/topo.ts, run on the same graph), naming a cycle.
import { describe, expect, it } from 'vitest';
import { GraphBuilder, modelBytes, rng, T } from '../helpers/build.js';
import { decodeModel } from '../../src/onnx/read.js';
import { validateModel } from '../../src/graph/validate.js';
import { topoOrder } from '../../src/graph/topo.js';

function branch(name: string, reads: string): GraphBuilder {
  const b = new GraphBuilder(name);
  b.node('Identity', [reads], {}, { outputs: [`${name}_out`] });
  b.output(`${name}_out`, [1]);
  return b;
}

describe('validation order check', () => {
  for (let seed = 1; seed <= 40; seed++) {
    it(`agrees with the topological sort (seed ${seed})`, () => {
      const r = rng(seed);
      const g = new GraphBuilder('g');
      g.input('x', [1]).input('c', [1], T.BOOL);
      const n = 3 + Math.floor(r() * 8);
      // a chain v0 <- x, v_i <- v_{i-1}; an If reads the chain through its branches and feeds the chain's tail
      const at = Math.floor(r() * n); // the If's output joins the chain here
      for (let i = 0; i < n; i++) {
        const prev = i === 0 ? 'x' : `v${i - 1}`;
        if (i === at) g.node('Add', [prev, 'ifout'], {}, { name: `n${i}`, outputs: [`v${i}`] });
        else g.node('Identity', [prev], {}, { name: `n${i}`, outputs: [`v${i}`] });
      }
      // a branch read of a value at or after `at` closes a cycle (that value needs ifout); before it, none
      const readA = `v${Math.floor(r() * n)}`, readB = r() < 0.5 ? 'x' : `v${Math.floor(r() * n)}`;
      g.node('If', ['c'], { then_branch: branch('then', readA), else_branch: branch('else', readB) }, { name: 'cond', outputs: ['ifout'] });
      g.output(`v${n - 1}`, [1]);
      // the If just before the node that reads it (then only a branch's read can be out of order), or shuffled
      const ifNode = g.nodes.pop()!;
      g.nodes.splice(at, 0, ifNode);
      if (r() < 0.4) g.nodes.sort(() => r() - 0.5);
      const m = decodeModel(modelBytes(g), '/x');
      let cyclic = false;
      try { topoOrder(m.graph); } catch { cyclic = true; }
      if (cyclic) expect(() => validateModel(m)).toThrow(/cycle/);
      else expect(() => validateModel(m)).not.toThrow();
    });
  }
});
