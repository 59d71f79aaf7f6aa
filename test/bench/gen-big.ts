// Generates the benchmark model: 40 blocks of 512-channel 3x3 Conv + BatchNormalization + Relu with seeded
// random weights (about 378 MB). Built directly as IR and written with pleat's streaming writer.
import type { Graph, Model, Node, Tensor, ValueInfo } from '../../src/graph/ir.js';
import { writeModelFile } from '../../src/onnx/write.js';
import { rng } from '../../models/builder.js';

function floatTensor(name: string, dims: number[], fill: (i: number) => number): Tensor {
  const n = dims.reduce((a, b) => a * b, 1);
  const v = new Float32Array(n);
  for (let i = 0; i < n; i++) v[i] = fill(i);
  return { name, dims, dataType: 1, storage: { kind: 'raw', bytes: new Uint8Array(v.buffer) }, docString: '', extra: [] };
}

function vi(name: string, shape: number[]): ValueInfo {
  return { name, elemType: 1, shape, docString: '', extra: [] };
}

function node(opType: string, name: string, inputs: string[], outputs: string[]): Node {
  return { name, opType, domain: '', inputs, outputs, attributes: [], docString: '', extra: [] };
}

export function bigModel(blocks = 40, channels = 512, seed = 1): Model {
  const r = rng(seed);
  const g: Graph = { name: 'bench', nodes: [], initializers: [], inputs: [vi('x', [1, channels, 8, 8])], outputs: [], valueInfo: [], docString: '', extra: [] };
  let cur = 'x';
  const std = Math.sqrt(2 / (channels * 9));
  for (let b = 0; b < blocks; b++) {
    const W = floatTensor(`conv${b}.weight`, [channels, channels, 3, 3], () => (r() * 2 - 1) * std * 1.7);
    g.initializers.push(W);
    const conv = node('Conv', `conv${b}`, [cur, W.name], [`conv${b}.out`]);
    conv.attributes.push({ name: 'pads', value: { type: 'INTS', ints: [1, 1, 1, 1] }, docString: '', refAttrName: '', extra: [] });
    g.nodes.push(conv);
    const p = (k: string, f: () => number) => { const t = floatTensor(`bn${b}.${k}`, [channels], f); g.initializers.push(t); return t.name; };
    const bn = node('BatchNormalization', `bn${b}`, [conv.outputs[0]!, p('scale', () => 0.5 + r()), p('shift', () => r() - 0.5),
      p('mean', () => (r() - 0.5) * 0.2), p('var', () => 0.5 + r())], [`bn${b}.out`]);
    g.nodes.push(bn);
    const relu = node('Relu', `relu${b}`, [bn.outputs[0]!], [`relu${b}.out`]);
    g.nodes.push(relu);
    cur = relu.outputs[0]!;
  }
  g.outputs.push(vi(cur, [1, channels, 8, 8]));
  return {
    irVersion: 8, opsets: [{ domain: '', version: 17, extra: [] }], producerName: 'pleat-bench', producerVersion: '1',
    domain: '', modelVersion: 0, docString: '', graph: g, metadata: [], extra: [], baseDir: '.',
  };
}

export function writeBigModel(path: string, blocks = 40): void {
  writeModelFile(bigModel(blocks), path);
}
