// The many-small-folds benchmark graph: a straight chain of `blocks` blocks of 4-channel 1x1 Conv +
// BatchNormalization + Relu (33,334 blocks make 100,002 nodes), each layer with its own seeded weights and
// statistics. Written with pleat's writer.
import type { Graph, Model, Node, Tensor, ValueInfo } from '../../src/graph/ir.js';
import { writeModelFile } from '../../src/onnx/write.js';
import { rng } from '../../models/builder.js';

const C = 4;

function floatTensor(name: string, dims: number[], values: Float32Array): Tensor {
  return { name, dims, dataType: 1, storage: { kind: 'raw', bytes: new Uint8Array(values.buffer, values.byteOffset, values.byteLength) }, docString: '', extra: [] };
}
const vi = (name: string, shape: number[]): ValueInfo => ({ name, elemType: 1, shape, docString: '', extra: [] });
const node = (opType: string, name: string, inputs: string[], outputs: string[]): Node =>
  ({ name, opType, domain: '', inputs, outputs, attributes: [], docString: '', extra: [] });

export function chainModel(blocks: number, seed = 5): Model {
  const r = rng(seed);
  const g: Graph = { name: 'chain', nodes: [], initializers: [], inputs: [vi('x', [1, C, 4, 4])], outputs: [], valueInfo: [], docString: '', extra: [] };
  let cur = 'x';
  const vals = (n: number, f: () => number) => { const v = new Float32Array(n); for (let i = 0; i < n; i++) v[i] = f(); return v; };
  for (let b = 0; b < blocks; b++) {
    g.initializers.push(
      floatTensor(`w${b}`, [C, C, 1, 1], vals(C * C, () => (r() * 2 - 1) * 0.9)),
      floatTensor(`s${b}`, [C], vals(C, () => 0.5 + r())), floatTensor(`t${b}`, [C], vals(C, () => r() - 0.5)),
      floatTensor(`m${b}`, [C], vals(C, () => (r() - 0.5) * 0.2)), floatTensor(`v${b}`, [C], vals(C, () => 0.5 + r())));
    g.nodes.push(node('Conv', `conv${b}`, [cur, `w${b}`], [`c${b}`]));
    g.nodes.push(node('BatchNormalization', `bn${b}`, [`c${b}`, `s${b}`, `t${b}`, `m${b}`, `v${b}`], [`y${b}`]));
    g.nodes.push(node('Relu', `relu${b}`, [`y${b}`], [`r${b}`]));
    cur = `r${b}`;
  }
  g.outputs.push(vi(cur, [1, C, 4, 4]));
  return {
    irVersion: 8, opsets: [{ domain: '', version: 17, extra: [] }], producerName: 'pleat-bench', producerVersion: '1',
    domain: '', modelVersion: 0, docString: '', graph: g, metadata: [], extra: [], baseDir: '.',
  };
}

export function writeChainModel(path: string, blocks = 33334): void {
  writeModelFile(chainModel(blocks), path);
}
