// The cases the fold engine's equivalence test runs, and what it compares: a canonical dump of the folded model
// (every graph's nodes, initializers with their values, inputs, outputs and value_info), the ledger, the
// rewritten nodes, and audit's findings of the original model. Hashes of these, recorded with the engine as it
// was before the use-def index became incremental, are committed in engine-expected.json.
import { createHash } from 'node:crypto';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { parseModel } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { analyze, foldModel, type FoldOptions, type ProofCase } from '../../src/fold/index.js';
import type { Graph, Model } from '../../src/graph/ir.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { chainModel } from '../bench/gen-chain.js';
import { randomCase } from './random-graphs.js';

export const dir = '/tmp';

export interface EngineCase {
  id: string;
  bytes: Uint8Array;
  options: FoldOptions;
  /** Run with a prover that fails some proofs (deterministically), or unproven. */
  proofs: 'none' | 'some-fail';
}

const sha = (s: string | Uint8Array) => createHash('sha256').update(s).digest('hex').slice(0, 24);

function hashProver(): (c: ProofCase) => { passed: boolean; proof: { maxAbs: number; maxRel: number; shape: number[] } } {
  return (c) => {
    // a region's shape counts too: the before and after graphs must be the regions the engine always built
    const h = sha(`${c.target}|${c.nodes.join(',')}|${c.before.nodes.length}|${c.after.nodes.length}|${c.before.inputs.map((i) => i.name).join(',')}|${c.after.outputs.map((o) => o.name).join(',')}`);
    return { passed: parseInt(h.slice(0, 6), 16) % 3 !== 0, proof: { maxAbs: 0, maxRel: 0, shape: [1] } };
  };
}

/** Every case: seeded random models (each unproven and with failing proofs), a 60-block chain, the demo models. */
export function engineCases(randomCount = 160): EngineCase[] {
  const out: EngineCase[] = [];
  for (let seed = 1; seed <= randomCount; seed++) {
    const c = randomCase(seed);
    out.push({ id: `random-${seed}`, bytes: c.bytes, options: c.options, proofs: 'none' });
    out.push({ id: `random-${seed}-proofs`, bytes: c.bytes, options: c.options, proofs: 'some-fail' });
  }
  out.push({ id: 'chain-60', bytes: serializeModel(chainModel(60)), options: {}, proofs: 'none' });
  out.push({ id: 'chain-60-proofs', bytes: serializeModel(chainModel(60)), options: {}, proofs: 'some-fail' });
  for (const m of ['pump-vibration', 'tray-edge', 'tray-sorter']) {
    const bytes = new Uint8Array(readFileSync(join(import.meta.dirname, '../../models', `${m}.onnx`)));
    out.push({ id: m, bytes, options: {}, proofs: 'none' });
    out.push({ id: `${m}-clone`, bytes, options: { cloneShared: true }, proofs: 'some-fail' });
  }
  return out;
}

function canonicalGraph(g: Graph): unknown {
  return {
    name: g.name,
    nodes: g.nodes.map((n) => ({
      name: n.name, op: n.opType, domain: n.domain, inputs: n.inputs, outputs: n.outputs,
      attributes: n.attributes.map((a) => {
        const v = a.value;
        if (v.type === 'GRAPH') return [a.name, canonicalGraph(v.g)];
        if (v.type === 'GRAPHS') return [a.name, v.graphs.map(canonicalGraph)];
        if (v.type === 'TENSOR') return [a.name, v.t.name, v.t.dims, v.t.dataType, Array.from(tensorToFloat64(v.t))];
        return [a.name, JSON.stringify(v, (_k, x) => (typeof x === 'bigint' ? String(x) : x instanceof Uint8Array ? Array.from(x) : x))];
      }),
    })),
    initializers: g.initializers.map((t) => [t.name, t.dims, t.dataType, Array.from(tensorToFloat64(t))]),
    inputs: g.inputs.map((v) => [v.name, v.elemType, v.shape]),
    outputs: g.outputs.map((v) => [v.name, v.elemType, v.shape]),
    valueInfo: g.valueInfo.map((v) => [v.name, v.elemType, v.shape]),
  };
}

/** A canonical dump of the model's graphs (independent of how the writer encodes them). */
export function canonicalModel(m: Model): string {
  return JSON.stringify(canonicalGraph(m.graph));
}

export interface EngineResult {
  model: string;
  ledger: string;
  rewritten: string;
  findings: string;
  /** The written bytes (compared within one run, not against the recorded hashes). */
  bytes: Uint8Array;
}

export function runEngineCase(c: EngineCase, fold: typeof foldModel = foldModel): EngineResult {
  const findings = analyze(parseModel(Uint8Array.from(c.bytes), dir), c.options);
  const model = parseModel(Uint8Array.from(c.bytes), dir);
  const options: FoldOptions = { ...c.options, ...(c.proofs === 'some-fail' ? { prove: hashProver() } : {}) };
  const { ledger, rewritten } = fold(model, options);
  return {
    model: sha(canonicalModel(model)),
    ledger: sha(JSON.stringify(ledger)),
    rewritten: sha(JSON.stringify(rewritten.map((x) => [x.label, x.graph, x.node.name, x.node.outputs]))),
    findings: sha(JSON.stringify(findings)),
    bytes: serializeModel(model),
  };
}
