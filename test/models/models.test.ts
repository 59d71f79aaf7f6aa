import { describe, expect, it } from 'vitest';
import { readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { buildDemoModels } from '../../models/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';
import { attrInt, type Model } from '../../src/graph/ir.js';
import { checkerAvailable, onnxCheck } from '../helpers/checker.js';
import { runOrt, type Feeds } from '../helpers/ort.js';
import { rng, uniform } from '../helpers/build.js';
import { analyze, foldModel } from '../../src/fold/index.js';
import { serializeModel } from '../../src/onnx/write.js';
import { maxDiff } from '../helpers/ort.js';

const MODELS_DIR = resolve(import.meta.dirname, '..', '..', 'models');
const built = buildDemoModels();
const names = built.map(([n]) => n);
const load = (name: string): Model => parseModel(readFileSync(join(MODELS_DIR, name)), MODELS_DIR, name);
const hasChecker = checkerAvailable();
if (!hasChecker) console.warn('SKIPPED: the ONNX checker (/usr/bin/python3 with onnx) is not available, demo models not checked by it');

const FEEDS: Record<string, { name: string; dims: number[] }> = {
  'tray-sorter.onnx': { name: 'image', dims: [2, 3, 64, 64] }, // batch is symbolic: run it with 2
  'pump-vibration.onnx': { name: 'vibration', dims: [1, 2, 256] },
  'tray-edge.onnx': { name: 'image', dims: [1, 3, 64, 64] },
};
const OUTPUTS: Record<string, Record<string, number[]>> = {
  'tray-sorter.onnx': { class_logits: [2, 4], tray_offset: [2, 2] },
  'pump-vibration.onnx': { fault_logits: [1, 3] },
  'tray-edge.onnx': { edge_mask: [1, 1, 64, 64] },
};

describe('demo models', () => {
  it('the script is deterministic: two builds give identical bytes', () => {
    const again = buildDemoModels();
    expect(again.map(([n]) => n)).toEqual(names);
    for (let i = 0; i < built.length; i++) expect(Buffer.compare(Buffer.from(again[i]![1]), Buffer.from(built[i]![1]))).toBe(0);
  });

  it('the committed .onnx files are exactly what the script builds (run `npm run models` after changing it)', () => {
    for (const [name, bytes] of built) {
      const committed = readFileSync(join(MODELS_DIR, name));
      expect(committed.equals(Buffer.from(bytes)), `${name} differs from the script's output`).toBe(true);
    }
  });

  it('are under 2 MB together', () => {
    const total = built.reduce((a, [, b]) => a + b.byteLength, 0);
    expect(total).toBeLessThan(2 * 1024 * 1024);
  });

  // Outside check: the ONNX standard's reference checker with full_check (shape inference included).
  it.skipIf(!hasChecker)('each passes the ONNX checker (onnx.checker.check_model, full_check=True)', () => {
    for (const name of names) expect(onnxCheck(join(MODELS_DIR, name)), name).toBe('');
  });

  // Outside check: onnxruntime-node runs each model and gives outputs of the declared shapes.
  it('each runs in onnxruntime-node with finite outputs of the declared shapes', async () => {
    for (const name of names) {
      const { name: input, dims } = FEEDS[name]!;
      const n = dims.reduce((a, b) => a * b, 1);
      const feeds: Feeds = { [input]: { dims, data: uniform(rng(7), n, -1, 1) } };
      const out = await runOrt(join(MODELS_DIR, name), feeds);
      expect(Object.keys(out).sort(), name).toEqual(Object.keys(OUTPUTS[name]!).sort());
      for (const [k, want] of Object.entries(OUTPUTS[name]!)) {
        expect(out[k]!.dims, `${name} ${k}`).toEqual(want);
        for (const v of out[k]!.data) expect(Number.isFinite(v), `${name} ${k}`).toBe(true);
      }
      if (name === 'tray-edge.onnx') {
        // Sigmoid output (ONNX operator docs: 1 / (1 + exp(-x))) lies in [0, 1]
        for (const v of out.edge_mask!.data) { expect(v).toBeGreaterThanOrEqual(0); expect(v).toBeLessThanOrEqual(1); }
      }
    }
  });

  it('declare opset 17, IR 8 and float32 weights', () => {
    for (const name of names) {
      const m = load(name);
      expect(m.irVersion, name).toBe(8);
      expect(m.opsets.map((o) => [o.domain, o.version]), name).toEqual([['', 17]]);
      for (const t of m.graph.initializers) expect(t.dataType, `${name} ${t.name}`).toBe(1);
      expect(m.docString).toMatch(/not trained/);
    }
    expect(load('tray-sorter.onnx').graph.inputs[0]!.shape).toEqual(['batch', 3, 64, 64]);
  });

  it('carry realistic running statistics with a few near-dead channels', () => {
    for (const name of names) {
      const m = load(name);
      const init = new Map(m.graph.initializers.map((t) => [t.name, tensorToFloat64(t)]));
      const norms = m.graph.nodes.filter((n) => n.opType === 'BatchNormalization');
      expect(norms.length, name).toBeGreaterThan(3);
      let dead = 0;
      for (const bn of norms) {
        const [scale, , mean, variance] = bn.inputs.slice(1).map((i) => init.get(i)!);
        expect(mean!.some((v) => Math.abs(v) > 0.05), `${bn.name} means all near 0`).toBe(true);
        expect(variance!.some((v) => Math.abs(v - 1) > 0.1), `${bn.name} variances all near 1`).toBe(true);
        for (let c = 0; c < variance!.length; c++) {
          expect(variance![c]!).toBeGreaterThan(0);
          if (variance![c]! < 1e-5) { dead++; expect(Math.abs(scale![c]!)).toBeLessThan(1e-3); }
        }
      }
      expect(dead, `${name} has no near-dead channel`).toBeGreaterThan(0);
    }
  });

  it('contain the structures the README promises', () => {
    const sorter = load('tray-sorter.onnx').graph;
    const ops = sorter.nodes.map((n) => n.opType);
    expect(ops.filter((o) => o === 'Add').length).toBe(2);
    const dw = sorter.nodes.filter((n) => n.opType === 'Conv' && attrInt(n, 'group', 1) > 1);
    expect(dw.length).toBe(2);
    for (const n of dw) expect(sorter.initializers.find((t) => t.name === n.inputs[1])!.dims[1]).toBe(1); // group = C
    // the shared case: tap.conv's output is read by its norm and by the placement head
    const readers = sorter.nodes.filter((n) => n.inputs.includes('tap.conv.y')).map((n) => n.opType).sort();
    expect(readers).toEqual(['BatchNormalization', 'GlobalAveragePool']);

    const pump = load('pump-vibration.onnx').graph;
    const seq = pump.nodes.map((n) => n.opType).join(' ');
    expect(seq).toContain('Gemm Relu BatchNormalization Gemm');
    expect(pump.nodes.filter((n) => n.opType === 'Conv').every((n) => n.inputs.length >= 2)).toBe(true);

    const edge = load('tray-edge.onnx').graph;
    const ups = edge.nodes.filter((n) => n.opType === 'ConvTranspose');
    expect(ups.map((n) => attrInt(n, 'group', 1))).toEqual([1, 2]);
    expect(edge.nodes.at(-1)!.opType).toBe('Sigmoid');
  });

  it('the audit agrees with what models/README.md says folds and what stays', () => {
    const want: Record<string, Array<[string, string, string | null, string | null]>> = {
      'tray-sorter.onnx': [
        ...['stem', 'res1.bn_a:res1.conv_a', 'res1.bn_b:res1.conv_b', 'res2.bn_a:res2.conv_a', 'res2.bn_b:res2.conv_b',
          'res2.skip_bn:res2.skip_conv', 'ds1.dw_bn:ds1.dw', 'ds1.pw_bn:ds1.pw', 'ds2.dw_bn:ds2.dw', 'ds2.pw_bn:ds2.pw']
          .map((s) => (s === 'stem' ? ['stem.bn', 'stem.conv'] : s.split(':')))
          .map(([bn, conv]) => [bn!, 'foldable', 'into-producer', conv!] as [string, string, string, string]),
        ['tap.bn', 'kept', null, 'shared-output'],
      ],
      'pump-vibration.onnx': [
        ...[1, 2, 3, 4].map((i) => [`c${i}.bn`, 'foldable', 'into-producer', `c${i}.conv`] as [string, string, string, string]),
        ['fc1.bn', 'foldable', 'into-consumer', 'fc2'],
      ],
      'tray-edge.onnx': [
        ['enc1.bn', 'foldable', 'into-producer', 'enc1.conv'], ['enc2.bn', 'foldable', 'into-producer', 'enc2.conv'],
        ['dec1.bn', 'foldable', 'into-producer', 'dec1.up'], ['dec2.bn', 'foldable', 'into-producer', 'dec2.up'],
      ],
    };
    for (const name of names) {
      const got = analyze(load(name)).map((f) => [f.node, f.status, f.status === 'kept' ? null : f.direction, f.status === 'kept' ? f.reason : f.target]);
      expect(got, name).toEqual(want[name]);
    }
  });

  // Outside check: onnxruntime-node runs the original and the folded model on the same seeded input.
  it('fold into models that onnxruntime-node finds equivalent to the originals', async () => {
    for (const name of names) {
      const { model, ledger } = foldModel(load(name));
      const folded = ledger.normalizations.filter((e) => e.status === 'folded').length;
      expect(folded, name).toBe(name === 'tray-sorter.onnx' ? 10 : name === 'pump-vibration.onnx' ? 5 : 4);
      const { name: input, dims } = FEEDS[name]!;
      const feeds: Feeds = { [input]: { dims, data: uniform(rng(11), dims.reduce((a, b) => a * b, 1), -1, 1) } };
      const before = await runOrt(join(MODELS_DIR, name), feeds);
      const after = await runOrt(serializeModel(model), feeds);
      for (const k of Object.keys(before)) {
        const { maxAbs, scale } = maxDiff(after[k]!.data, before[k]!.data);
        // float32 rounding after folding: measured about 3e-7 of the output scale; 1e-5 is a common-practice margin, no source
        expect(maxAbs, `${name} ${k}`).toBeLessThanOrEqual(1e-5 * Math.max(scale, 1));
      }
    }
  });
});
