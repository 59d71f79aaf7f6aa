// Hand-built reports for the formatter tests (invented data in our own scenario: a tray-sorting camera model).
import { SCHEMA_VERSION, type AuditReport, type FoldReport } from '../../src/jobs/types.js';
import type { CompareReport } from '../../src/verify/compare.js';

export function foldReport(over: Partial<FoldReport> = {}): FoldReport {
  return {
    schemaVersion: SCHEMA_VERSION, command: 'fold', model: 'models/tray-sorter.onnx', output: 'out/tray-sorter.onnx',
    normalizations: [
      { node: 'stem_bn', op: 'BatchNormalization', kind: 'normalization', status: 'folded', direction: 'into-producer', target: 'stem_conv', targets: ['stem_conv'], cloneBytes: 0, reason: null, hint: 'scaled 16 output channels of stem_conv', graph: 'main' },
      { node: 'head_bn', op: 'BatchNormalization', kind: 'normalization', status: 'folded', direction: 'into-consumer', target: 'head_fc', targets: ['head_fc'], cloneBytes: 0, reason: null, hint: 'scaled the input columns of head_fc', graph: 'main' },
      { node: 'act_half', op: 'Mul', kind: 'affine-step', status: 'folded', direction: 'into-consumer', target: 'head_fc', targets: ['head_fc'], cloneBytes: 0, reason: null, hint: 'scales the input channels of \'head_fc\'', graph: 'main' },
      { node: 'edge_bn', op: 'BatchNormalization', kind: 'normalization', status: 'kept', direction: null, target: null, targets: [], cloneBytes: 0, reason: 'padded-consumer', hint: 'remove the padding of the next convolution <pad=1> & "fold"', graph: 'main/branch_if.then_branch' },
    ],
    nodesBefore: 41, nodesAfter: 37, bytesBefore: 10240, bytesAfter: 10040,
    check: {
      passed: true, skipped: null, probes: 2, seed: 0, gates: ['maxRel <= 1e-3 and cosine >= 0.99999'],
      outputs: [{ name: 'tray_class', maxAbs: 1.2e-7, maxRel: 3.4e-6, rms: 2e-8, cosine: 0.9999999999, passed: true }],
    },
    quantization: [{
      target: 'stem_conv', norms: ['stem_bn'], channels: 16, spreadBefore: 2.4, spreadAfter: 51.2,
      sqnrBefore: { tensor: 38.2, channel: 41.5, worstChannel: 30.1 }, sqnrAfter: { tensor: 36.9, channel: 41.5, worstChannel: 8.4 }, flagged: true,
    }],
    quantThresholdDb: 20,
    equalized: [],
    int8: null,
    storage: null,
    failed: false,
    ...over,
  };
}

export function auditReport(over: Partial<AuditReport> = {}): AuditReport {
  return {
    schemaVersion: SCHEMA_VERSION, command: 'audit', model: 'models/pump|monitor.onnx',
    normalizations: [
      { node: 'conv1_bn', op: 'BatchNormalization', kind: 'normalization', status: 'foldable', direction: 'into-producer', target: 'conv1', targets: ['conv1'], cloneBytes: 0, reason: null, hint: 'would scale conv1', graph: 'main' },
      { node: 'ln', op: 'LayerNormalization', kind: 'normalization', status: 'kept', direction: null, target: null, targets: [], cloneBytes: 0, reason: 'runtime-statistics', hint: 'statistics come from each input; its affine tail could fold into dense_2', graph: 'main' },
    ],
    foldable: 1, kept: 1, alsoFoldable: 0, failOn: null, failed: false,
    ...over,
  };
}

export function compareReport(): CompareReport {
  const m = { maxAbs: 2e-7, maxRel: 1e-6, rms: 5e-8, cosine: 1, nanMismatches: 0, peak: 3.2, count: 10 };
  return {
    passed: false, seed: 0, probes: 3, budget: true,
    inputs: [{ name: 'image', dtype: 'float32', dims: [1, 3, 8, 8], source: 'probe' }],
    outputs: [
      { name: 'tray_class', status: 'compared', dtype: 'float32', dims: [1, 10], metrics: m,
        budget: { own: m, deploy: { ...m, maxAbs: 3e-7 }, addedAbs: 1e-7, addedRel: 0 },
        gate: { expr: 'maxRel <= 1e-3 and cosine >= 0.99999', source: 'default', passed: true }, passed: true },
      { name: 'edges', status: 'only-in-a', dtype: 'float32', dims: [1, 1, 8, 8], passed: false, problem: "model B has no output 'edges'" },
    ],
  };
}
