// `survey`: what a model file holds, for people and scripts.
import { statSync } from 'node:fs';
import type { Dim, Graph, Model, Tensor, ValueInfo } from '../graph/ir.js';
import { externalStorage, storageKind } from '../graph/ir.js';
import { bytesPerElement, dataTypeName, tensorByteSize } from '../graph/tensor.js';
import { memberOf } from '../graph/names.js';
import { eachTensor, externalRef, resolveLocation } from '../onnx/external.js';
import { readModelFile } from '../onnx/read.js';
import { isPleatError } from '../errors.js';
import { SCHEMA_VERSION } from './types.js';
import { evaluatorGaps, type EvaluatorGap, type OpTally } from '../eval/coverage.js';

export const NORMALIZATION_OPS = [
  'BatchNormalization', 'InstanceNormalization', 'LayerNormalization', 'GroupNormalization',
  'LpNormalization', 'LRN', 'MeanVarianceNormalization',
] as const;

export interface SurveyValue { name: string; type: string; dims: Array<number | string | null> | null }

/** An external tensor whose bytes survey could not find (the structure is still surveyed). */
export interface MissingData { tensor: string; location: string; problem: string }

export interface SurveyReport {
  schemaVersion: number;
  command: 'survey';
  file: string | null;
  irVersion: number;
  opsets: Array<{ domain: string; version: number }>;
  producer: { name: string; version: string };
  inputs: SurveyValue[];
  outputs: SurveyValue[];
  /** Nodes in the main graph and in every subgraph. */
  nodeCount: number;
  subgraphCount: number;
  /** Node count by op type (domain-qualified outside the default domain), most frequent first. */
  opCounts: Array<{ op: string; count: number }>;
  initializers: { count: number; bytes: number };
  constantNodes: { count: number; bytes: number };
  /** Bytes the external tensors declare (their dims times element size). */
  externalBytes: number;
  /**
   * The side files the external tensors name: each distinct `location`, as written, sorted by its UTF-8 bytes (the
   * order in which the provenance entry pleat.source.external.sha256 lists them); empty without external data.
   */
  sideFiles: string[];
  /** External tensors whose side file is missing or too short: empty when every byte is there. */
  missingData: MissingData[];
  normalizations: Array<{ op: string; count: number }>;
  /**
   * Whether pleat's evaluator can run every operator (so the whole-model check of a fold can run), and the
   * operators it cannot run, with the reason for each.
   */
  evaluator: { runsAll: boolean; cannotRun: EvaluatorGap[] };
}

function describeValue(v: ValueInfo): SurveyValue {
  return {
    name: v.name,
    type: v.elemType === undefined ? 'non-tensor' : dataTypeName(v.elemType),
    dims: v.shape === undefined ? null : v.shape.map((d: Dim) => d),
  };
}

/** Bytes a tensor's dims need (external tensors left unloaded hold none yet). */
function declaredBytes(t: Tensor): number {
  const ext = externalStorage(t);
  if (!ext || ext.bytes.byteLength > 0) return tensorByteSize(t);
  const per = bytesPerElement(t.dataType) ?? 0;
  return t.dims.reduce((a, d) => a * Number(d), 1) * per;
}

/** External tensors whose side file cannot be opened or is shorter than offset + length. */
function missingExternal(model: Model, label: string): MissingData[] {
  const out: MissingData[] = [];
  eachTensor(model.graph, (t) => {
    const ext = externalStorage(t);
    if (!ext || ext.bytes.byteLength > 0) return;
    let location = '?';
    try {
      const ref = externalRef(t, label);
      location = ref.location;
      const path = resolveLocation(model.baseDir, ref.location, label, t.name);
      let size: number;
      try {
        const st = statSync(path);
        if (!st.isFile()) { out.push({ tensor: t.name, location, problem: `'${location}' cannot be opened (not a regular file)` }); return; }
        size = st.size;
      } catch {
        out.push({ tensor: t.name, location, problem: `'${location}' cannot be opened (no such file)` });
        return;
      }
      const length = ref.length ?? declaredBytes(t);
      if (ref.offset + length > size) {
        out.push({ tensor: t.name, location, problem: `offset ${ref.offset}, length ${length} runs past the end of '${location}' (${size} bytes)` });
      }
    } catch (e) {
      if (!isPleatError(e)) throw e;
      out.push({ tensor: t.name, location, problem: e.message.replace(`${label}: `, '') });
    }
  });
  return out;
}

/** What the walk over every graph counts. */
interface Tally {
  counts: Map<string, OpTally>; // by op, domain-qualified outside the default domain
  nodeCount: number;
  subgraphCount: number;
  initCount: number;
  initBytes: number;
  constCount: number;
  constBytes: number;
  external: number;
  /** Each distinct external-data location met (a file without external data adds none). */
  locations: Set<string>;
}

/** Count an external tensor's declared bytes and note its side file. */
function tallyExternal(t: Tally, x: Tensor, bytes: number): void {
  t.external += bytes;
  const entries = externalStorage(x)?.entries;
  if (entries) for (const [k, v] of entries) if (k === 'location') t.locations.add(v);
}

// One walk over every tensor (a graph of 10^5 nodes holds some 10^5 tensors: each pass over them shows). Each loop
// is a function of its own, and subgraphs wait in a list rather than being walked from inside the loop over the
// nodes: one function holding both loops and the recursion was compiled again for each and fell back to the
// interpreter on each small subgraph.

function tallyInitializers(t: Tally, g: Graph, isInput: ((name: string) => boolean) | undefined, initialized: Set<string>): void {
  const inits = g.initializers;
  for (let i = 0; i < inits.length; i++) {
    const init = inits[i]!;
    t.initCount++;
    const bytes = declaredBytes(init);
    t.initBytes += bytes;
    if (storageKind(init) === 'external') tallyExternal(t, init, bytes);
    if (isInput !== undefined && isInput(init.name)) initialized.add(init.name);
  }
}

function tallyNodes(t: Tally, g: Graph, subgraphs: Graph[]): void {
  const nodes = g.nodes;
  for (let j = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    t.nodeCount++;
    const domain = n.domain === 'ai.onnx' ? '' : n.domain;
    const op = domain ? `${domain}.${n.opType}` : n.opType;
    const tally = t.counts.get(op);
    if (tally) tally.count++;
    else t.counts.set(op, { domain, opType: n.opType, count: 1 });
    const constant = n.opType === 'Constant';
    if (constant) t.constCount++;
    const attrs = n.attributes;
    for (let k = 0; k < attrs.length; k++) {
      const v = attrs[k]!.value;
      if (v.type === 'TENSOR') {
        const ext = storageKind(v.t) === 'external';
        if (!constant && !ext) continue;
        const bytes = declaredBytes(v.t);
        if (constant) t.constBytes += bytes;
        if (ext) tallyExternal(t, v.t, bytes);
      } else if (v.type === 'TENSORS') {
        for (const x of v.tensors) if (storageKind(x) === 'external') tallyExternal(t, x, declaredBytes(x));
      } else if (v.type === 'GRAPH') {
        subgraphs.push(v.g);
      } else if (v.type === 'GRAPHS') {
        for (const sg of v.graphs) subgraphs.push(sg);
      }
    }
  }
}

export function surveyModel(model: Model, file: string | null = null, missingData: MissingData[] = []): SurveyReport {
  const t: Tally = {
    counts: new Map(), nodeCount: 0, subgraphCount: 0, initCount: 0, initBytes: 0, constCount: 0, constBytes: 0, external: 0,
    locations: new Set(),
  };
  // graph inputs that an initializer gives a default: the initializers against a set of the inputs (older exports
  // list every weight as a graph input too, and a search per input grew with their product)
  const isInput = memberOf(model.graph.inputs.map((v) => v.name));
  const initialized = new Set<string>();
  // graphs in the order a depth-first walk meets them (a stack, each graph's subgraphs pushed in reverse)
  const todo: Graph[] = [model.graph];
  const found: Graph[] = [];
  while (todo.length > 0) {
    const g = todo.pop()!;
    tallyInitializers(t, g, g === model.graph ? isInput : undefined, initialized);
    found.length = 0;
    tallyNodes(t, g, found);
    t.subgraphCount += found.length;
    for (let k = found.length - 1; k >= 0; k--) todo.push(found[k]!);
  }
  const counts = t.counts;
  const { nodeCount, subgraphCount, initCount, initBytes, constCount, constBytes, external } = t;
  const gaps = evaluatorGaps(model, [...counts.values()]);
  const opCounts = [...counts].map(([op, t]) => ({ op, count: t.count }))
    .sort((a, b) => b.count - a.count || (a.op < b.op ? -1 : a.op > b.op ? 1 : 0));
  return {
    schemaVersion: SCHEMA_VERSION,
    command: 'survey',
    file,
    irVersion: model.irVersion,
    opsets: model.opsets.map((o) => ({ domain: o.domain || 'ai.onnx', version: o.version })),
    producer: { name: model.producerName, version: model.producerVersion },
    inputs: model.graph.inputs.filter((v) => !initialized.has(v.name)).map(describeValue),
    outputs: model.graph.outputs.map(describeValue),
    nodeCount,
    subgraphCount,
    opCounts,
    initializers: { count: initCount, bytes: initBytes },
    constantNodes: { count: constCount, bytes: constBytes },
    externalBytes: external,
    sideFiles: [...t.locations].sort((a, b) => Buffer.compare(Buffer.from(a, 'utf8'), Buffer.from(b, 'utf8'))),
    missingData,
    normalizations: opCounts.filter((c) => (NORMALIZATION_OPS as readonly string[]).includes(c.op)),
    evaluator: { runsAll: gaps.length === 0, cannotRun: gaps },
  };
}

/**
 * Survey a file. When some external data cannot be read, the structure is still surveyed (from the model file
 * alone) and `missingData` lists each tensor whose bytes are missing.
 */
export function survey(path: string): SurveyReport {
  return surveyFile(path).report;
}

/** survey, plus the reader's own one-line message when some external data could not be read (else null). */
export function surveyFile(path: string): { report: SurveyReport; readError: string | null } {
  try {
    return { report: surveyModel(readModelFile(path), path), readError: null };
  } catch (e) {
    if (!isPleatError(e)) throw e;
    let model: Model;
    try {
      model = readModelFile(path, undefined, { externalData: 'leave' });
    } catch {
      throw e; // the structure itself is unreadable: the first error says why
    }
    const missing = missingExternal(model, path);
    if (!missing.length) throw e;
    return { report: surveyModel(model, path, missing), readError: e.message };
  }
}
