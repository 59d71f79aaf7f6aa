// The fold driver keeps one use-def index per graph and tells it each sweep's edits (src/fold/apply.ts,
// updateIndex). After a fold every index must answer exactly as one built afresh from the folded graph: for
// seeded random models (chains, branches, fan-out, shared weights, Constant parameters, If bodies, IR version 3),
// unproven, with proofs that fail and are undone, and with --clone-shared.
import { describe, expect, it } from 'vitest';
import { parseModel } from '../../src/onnx/read.js';
import { foldModel, type FoldOptions, type ProofCase } from '../../src/fold/index.js';
import { buildUseDef } from '../../src/graph/usedef.js';
import type { Graph } from '../../src/graph/ir.js';
import { eachGraph } from '../../src/fold/scope.js';
import { randomCase } from './random-graphs.js';

/** Every value name a graph has now or had before the fold, and a name that is none. */
function namesOf(g: Graph, into: Set<string>): Set<string> {
  into.add('no such value');
  for (const v of [...g.inputs, ...g.outputs]) into.add(v.name);
  for (const t of g.initializers) into.add(t.name);
  for (const n of g.nodes) for (const v of [...n.inputs, ...n.outputs]) if (v) into.add(v);
  return into;
}

/** Fails every third proof it is asked for (the driver then undoes that fold). */
function someFail(): (c: ProofCase) => boolean {
  let k = 0;
  return () => ++k % 3 !== 0;
}

describe('the fold driver\'s indexes after a fold', () => {
  for (const mode of ['unproven', 'proofs', 'clone-shared'] as const) {
    it(`answer as indexes built from the folded graphs do (${mode}, seeded)`, () => {
      let folds = 0;
      for (let seed = 1; seed <= 60; seed++) {
        const c = randomCase(seed);
        const model = parseModel(Uint8Array.from(c.bytes), '/tmp');
        const before = new Map<Graph, Set<string>>();
        eachGraph(model.graph, (g) => { before.set(g, namesOf(g, new Set())); });
        const options: FoldOptions = { ...c.options, ...(mode === 'proofs' ? { prove: someFail() } : {}), ...(mode === 'clone-shared' ? { cloneShared: true } : {}) };
        const { scopes, ledger } = foldModel(model, options);
        folds += ledger.normalizations.filter((e) => e.status === 'folded').length;
        for (const s of scopes) {
          const fresh = buildUseDef(s.graph);
          for (const v of namesOf(s.graph, before.get(s.graph) ?? new Set())) {
            const at = `seed ${seed}, ${s.path}, '${v}'`;
            expect(s.ud.producer(v), `producer of ${at}`).toBe(fresh.producer(v));
            expect(s.ud.consumers(v), `readers of ${at}`).toEqual(fresh.consumers(v));
            expect(s.ud.initializer(v), `initializer ${at}`).toBe(fresh.initializer(v));
            expect(s.ud.isGraphOutput(v), `output ${at}`).toBe(fresh.isGraphOutput(v));
            expect(s.ud.isGraphInput(v), `input ${at}`).toBe(fresh.isGraphInput(v));
            expect(s.ud.defines(v), `defines ${at}`).toBe(fresh.defines(v));
          }
        }
      }
      expect(folds).toBeGreaterThan(50); // the models did fold
    });
  }
});
