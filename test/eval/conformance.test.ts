// ONNX backend conformance: every case copied into test/fixtures/onnx-conformance/ (source: the ONNX project's
// onnx 1.12.0 backend test data, Apache-2.0, generated from Debian python3-onnx; see the README there for the
// selection, which does not depend on pleat's kernels) is run through pleat's evaluator in float64 and compared
// with the expected outputs the ONNX project computed with its reference implementations. Float outputs must
// agree within float32 rounding (|a-b| <= 1e-4 * max(1, |b|)); integer and bool outputs must be exact.
// A case whose operator has no kernel fails, naming the operator.
import { existsSync, readdirSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { parseTensor, readModelFile } from '../../src/onnx/read.js';
import { runModel, tensorToValue } from '../../src/eval/run.js';
import { findKernel } from '../../src/eval/registry.js';
import { opsetVersion, subgraphsOf, type Graph, type Model } from '../../src/graph/ir.js';
import { bfloatBitsToNumber, isFloatType } from '../../src/graph/tensor.js';
import { DataType } from '../../src/graph/ir.js';
import type { Value } from '../../src/eval/value.js';

const DIR = join(import.meta.dirname, '..', 'fixtures', 'onnx-conformance');
const cases = existsSync(DIR) ? readdirSync(DIR, { withFileTypes: true }).filter((e) => e.isDirectory()).map((e) => e.name).sort() : [];

function tensorsIn(dir: string, prefix: 'input' | 'output'): Value[] {
  const files = readdirSync(dir).filter((f) => f.startsWith(`${prefix}_`) && f.endsWith('.pb'))
    .sort((a, b) => Number(a.slice(prefix.length + 1, -3)) - Number(b.slice(prefix.length + 1, -3)));
  return files.map((f) => tensorToValue(parseTensor(readFileSync(join(dir, f))), 'float64'));
}

/**
 * The onnx 1.12 test data stores bfloat16 tensors as UINT16 bit patterns (numpy has no bfloat16); read them as
 * the bfloat16 values the graph declares.
 */
function asDeclared(v: Value, declared: number | undefined): Value {
  if (declared !== DataType.BFLOAT16 || v.type !== DataType.UINT16) return v;
  return { type: DataType.BFLOAT16, dims: v.dims, data: Float64Array.from(v.data, bfloatBitsToNumber) };
}

/** The first mismatch between an output and its expected value, or '' when they agree. */
function mismatch(got: Value, want: Value): string {
  if (got.dims.join(',') !== want.dims.join(',')) return `dims [${got.dims}] != expected [${want.dims}]`;
  if (got.type !== want.type) return `element type ${got.type} != expected ${want.type}`;
  const float = isFloatType(want.type);
  for (let i = 0; i < want.data.length; i++) {
    const a = got.data[i]!, b = want.data[i]!;
    if (a === b || (Number.isNaN(a) && Number.isNaN(b))) continue;
    if (float && Math.abs(a - b) <= 1e-4 * Math.max(1, Math.abs(b))) continue;
    return `element ${i}: ${a} != expected ${b}`;
  }
  return '';
}

/** Operators of the model (subgraphs included) that have no kernel at the model's opset. */
function missingKernels(model: Model): Set<string> {
  const missing = new Set<string>();
  const walk = (g: Graph) => {
    for (const n of g.nodes) {
      const domain = n.domain === 'ai.onnx' ? '' : n.domain;
      if (!findKernel(domain, n.opType, opsetVersion(model, domain) ?? 0)) missing.add(n.opType);
      for (const sg of subgraphsOf(n)) walk(sg);
    }
  };
  walk(model.graph);
  return missing;
}

let passed = 0;

describe('ONNX backend conformance cases (onnx 1.12.0 test data)', () => {
  it('has the copied fixtures', () => {
    expect(cases.length).toBeGreaterThan(100);
  });

  it.for(cases)('%s', (name) => {
    const dir = join(DIR, name);
    const model = readModelFile(join(dir, 'model.onnx'));
    const missing = missingKernels(model);
    expect([...missing], `${name}: operators without a kernel`).toEqual([]);
    const sets = readdirSync(dir).filter((d) => d.startsWith('test_data_set_')).sort();
    expect(sets.length).toBeGreaterThan(0);
    for (const set of sets) {
      // inputs are given in the order of the graph's inputs (minus initializer-backed ones)
      const inits = new Set(model.graph.initializers.map((t) => t.name));
      const graphInputs = model.graph.inputs.filter((i) => !inits.has(i.name));
      const inputs = tensorsIn(join(dir, set), 'input').map((v, i) => asDeclared(v, graphInputs[i]?.elemType));
      const expected = tensorsIn(join(dir, set), 'output').map((v, i) => asDeclared(v, model.graph.outputs[i]?.elemType));
      const feeds = new Map<string, Value>(inputs.map((v, i) => [graphInputs[i]!.name, v]));
      const out = runModel(model, feeds, { precision: 'float64' });
      model.graph.outputs.forEach((o, i) => {
        const got = out.get(o.name);
        expect(got, `${name}/${set}: output '${o.name}' missing`).toBeDefined();
        expect(mismatch(got!, expected[i]!), `${name}/${set}: output '${o.name}'`).toBe('');
      });
    }
    passed++;
  });

  afterAll(() => {
    console.log(`onnx conformance: ${passed}/${cases.length} selected cases passed`);
  });
});
