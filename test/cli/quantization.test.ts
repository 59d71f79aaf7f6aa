// The quantization options from the command line: --simulate-int8 weights on compare and fold,
// --int8-granularity, --quant-threshold, --equalize, and the `sqnr` name in a fold gate. The JSON is read back
// against the shipped JSON Schema (ajv).
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { pleat } from '../helpers/cli.js';
import { schemaValidator } from '../report/helpers.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-quant-cli-'));
const validate = schemaValidator();
const MODEL = 'models/pump-vibration.onnx';

describe('compare --simulate-int8 weights', () => {
  it('rounds B\'s weights, says so, and per-channel scales lose less than one scale per tensor', () => {
    const run = (g: string) => {
      const r = pleat(['compare', MODEL, MODEL, '--simulate-int8', 'weights', '--int8-granularity', g, '--probes', '2', '--json']);
      expect([0, 1], r.stderr).toContain(r.code);
      const j = JSON.parse(r.stdout);
      expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
      return j;
    };
    const t = run('tensor'), c = run('channel');
    expect(t.int8Weights).toEqual({ granularity: 'tensor', layers: 6 });
    expect(c.int8Weights.granularity).toBe('channel');
    const err = (j: { outputs: Array<{ metrics: { maxAbs: number } }> }) => j.outputs[0]!.metrics.maxAbs;
    expect(err(t)).toBeGreaterThan(0);
    expect(err(c)).toBeLessThanOrEqual(err(t));
    expect(t.outputs[0].gate).toEqual({ expr: 'cosine >= 0.999', source: 'default', passed: expect.any(Boolean), limits: [] });
    const text = pleat(['compare', MODEL, MODEL, '--simulate-int8', 'weights', '--probes', '1']);
    expect(text.stdout).toMatch(/model B ran with 8-bit weights: 6 Conv\/Gemm\/MatMul layers rounded .* one scale per tensor/);
  });

  it('a value other than weights is a usage error', () => {
    const r = pleat(['compare', MODEL, MODEL, '--simulate-int8', 'activations']);
    expect(r.code).toBe(2);
  });
});

describe('fold: quantization section', () => {
  it('SQNR per layer before and after, the int8 simulation, and --quant-threshold moves the flag', () => {
    const out = join(dir, 'pv.onnx');
    const r = pleat(['fold', MODEL, '-o', out, '--simulate-int8', 'weights', '--json']);
    expect(r.code, r.stderr).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(validate(j), JSON.stringify(validate.errors)).toBe(true);
    expect(j.quantThresholdDb).toBe(20);
    expect(j.quantization.length).toBeGreaterThan(0);
    for (const q of j.quantization) {
      expect(q.sqnrAfter.channel).toBeGreaterThanOrEqual(q.sqnrAfter.tensor - 1e-9);
      expect(q.flagged).toBe(q.sqnrAfter.worstChannel < 20 && q.sqnrAfter.worstChannel < q.sqnrBefore.worstChannel);
    }
    expect(j.int8.granularity).toBe('tensor');
    expect(j.int8.outputs[0].name).toBe('fault_logits');
    expect(j.int8.outputs[0].original.maxAbs).toBeGreaterThan(0);
    expect(j.int8.outputs[0].folded.maxAbs).toBeGreaterThan(0);
    const high = JSON.parse(pleat(['fold', MODEL, '-o', out, '--quant-threshold', '200', '--json']).stdout);
    type Q = { flagged: boolean; sqnrBefore: { worstChannel: number }; sqnrAfter: { worstChannel: number } };
    const worse = high.quantization.filter((q: Q) => q.sqnrAfter.worstChannel < q.sqnrBefore.worstChannel);
    expect(worse.length).toBeGreaterThan(0);
    expect(worse.every((q: Q) => q.flagged)).toBe(true);
    const text = pleat(['fold', MODEL, '-o', out, '--simulate-int8', 'weights', '--int8-granularity', 'channel']).stdout;
    expect(text).toMatch(/sqnr tensor [\d.]+ -> [\d.]+, channel [\d.]+ -> [\d.]+, worst channel/);
    expect(text).toMatch(/8-bit weights, one scale per output channel/);
    expect(text).toMatch(/fault_logits\s+original: maxAbs/);
  });

  it('a gate may name sqnr: the lowest worst-channel SQNR of the folded layers', () => {
    const out = join(dir, 'gated.onnx');
    const pass = pleat(['fold', MODEL, '-o', out, '--gate', 'maxRel <= 1e-3 and sqnr >= -1000', '--json']);
    expect(pass.code, pass.stderr).toBe(0);
    const fail = pleat(['fold', MODEL, '-o', join(dir, 'gated-fail.onnx'), '--gate', 'maxRel <= 1e-3 and sqnr >= 1000', '--json']);
    expect(fail.code).toBe(1);
    expect(JSON.parse(fail.stdout).output).toBeNull();
  });

  it('--equalize lists its pairs in the text ledger', () => {
    const r = pleat(['fold', MODEL, '-o', join(dir, 'eq.onnx'), '--equalize']);
    expect(r.code, r.stderr).toBe(0);
    expect(r.stdout).toMatch(/equalized pairs \(cross-layer equalization/);
    expect(r.stdout).toMatch(/equalized\s+c1\.conv -> c2\.conv\s+\d+ channels/);
    // fc1.bn folds into fc2's input columns, so balancing fc1 against fc2 would starve fc1: left as it was
    expect(r.stdout).toMatch(/refused\s+fc1 -> fc2\s+no-gain: equalizing this chain would not raise its weakest channel/);
  });
});
