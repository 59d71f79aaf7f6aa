// Shared steps of the fold tests: build -> read with pleat -> fold -> write, then the outside checks: the
// ONNX reference checker on the written file and onnxruntime-node (graph optimizations off) on both models.
import { expect } from 'vitest';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { parseModel } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { analyze, foldModel } from '../../src/fold/index.js';
import type { Finding, FoldLedger, FoldOptions } from '../../src/fold/index.js';
import { GraphBuilder, modelBytes, randn, rng, type ModelOptions } from '../helpers/build.js';
import { maxDiff, runOrt, type Feeds } from '../helpers/ort.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';

export const dir = mkdtempSync(join(tmpdir(), 'pleat-fold-'));
let counter = 0;

export interface FoldResult {
  before: Uint8Array;
  after: Uint8Array;
  ledger: FoldLedger;
  findings: Finding[];
  path: string;
}

export function foldBytes(bytes: Uint8Array, opts: FoldOptions = {}): { bytes: Uint8Array; ledger: FoldLedger } {
  // A copy: fold rewrites tensor bytes in place, and they are views into the buffer parsed.
  const model = parseModel(Uint8Array.from(bytes), dir);
  const { ledger } = foldModel(model, opts);
  return { bytes: serializeModel(model), ledger };
}

/** Float32 inputs for every graph input, seeded. */
export function feedsFor(shapes: Record<string, number[]>, seed = 11, scale = 1): Feeds {
  const r = rng(seed);
  const feeds: Feeds = {};
  for (const [name, dims] of Object.entries(shapes)) feeds[name] = { dims, data: randn(r, dims.reduce((a, b) => a * b, 1), scale) };
  return feeds;
}

/**
 * Fold a built model and check it: the ONNX checker passes on the written file, onnxruntime-node gives the
 * same outputs for both models within 1e-4 of the output scale, and audit agrees with the fold's ledger.
 */
export async function foldAndCheck(g: GraphBuilder, feeds: Feeds, opts: FoldOptions & { agree?: boolean } = {}, mo: ModelOptions = {}, tol = 1e-4): Promise<FoldResult> {
  const before = modelBytes(g, mo);
  const findings = analyze(parseModel(before, dir), opts);
  const { bytes: after, ledger } = foldBytes(before, opts);
  const path = join(dir, `folded_${counter++}.onnx`);
  writeFileSync(path, after);
  if (checkerAvailable()) expect(onnxCheck(path)).toBe('');
  const want = await runOrt(before, feeds);
  const got = await runOrt(after, feeds);
  for (const [k, v] of Object.entries(want)) {
    expect(got[k]!.dims).toEqual(v.dims);
    const { maxAbs, scale } = maxDiff(got[k]!.data, v.data);
    expect(maxAbs, `output ${k}: max |diff| ${maxAbs} at scale ${scale}`).toBeLessThanOrEqual(tol * Math.max(scale, 1e-6));
  }
  if (opts.agree !== false) expectAgreement(findings, ledger);
  return { before, after, ledger, findings, path };
}

/** Audit and fold must agree: foldable <-> folded, and a kept norm keeps the same reason. */
export function expectAgreement(findings: Finding[], ledger: FoldLedger): void {
  const key = (x: { graph: string; node: string }) => `${x.graph}/${x.node}`;
  const fromFold = new Map(ledger.normalizations.map((e) => [key(e), e]));
  expect(ledger.normalizations.length).toBe(findings.length);
  for (const f of findings) {
    const e = fromFold.get(key(f));
    expect(e, `ledger entry for ${key(f)}`).toBeDefined();
    if (f.status === 'foldable') {
      expect(e!.status, `${key(f)}: ${e!.hint}`).toBe('folded');
      expect([e!.direction, e!.target]).toEqual([f.direction, f.target]);
    } else {
      expect([e!.status, e!.reason]).toEqual(['kept', f.reason]);
    }
  }
}

/** Ledger statuses as compact strings, e.g. 'bn:folded:into-producer:conv' or 'bn:kept:shared-output'. */
export function summary(ledger: FoldLedger): string[] {
  return ledger.normalizations.map((e) => (e.status === 'folded' ? `${e.node}:folded:${e.direction}:${e.target}` : `${e.node}:kept:${e.reason}`));
}

export function bnParams(g: GraphBuilder, prefix: string, c: number, seed: number, opts: { nearZeroVar?: boolean } = {}): string[] {
  const r = rng(seed);
  const gamma = randn(r, c, 0.5, 1);
  const beta = randn(r, c, 0.5);
  const mean = randn(r, c, 0.5);
  const variance = Float32Array.from(randn(r, c), (v) => 0.2 + v * v);
  if (opts.nearZeroVar) { variance[0] = 1e-7; if (c > 2) variance[c - 1] = 0; }
  return [g.init(`${prefix}_scale`, [c], gamma), g.init(`${prefix}_B`, [c], beta), g.init(`${prefix}_mean`, [c], mean), g.init(`${prefix}_var`, [c], variance)];
}
