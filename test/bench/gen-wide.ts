// A large synthetic graph for the audit benchmark: chains of Conv/BatchNormalization/Relu with branches
// (a Relu read by two convolutions that are added back) and If subgraphs, of about `target` nodes.
import type { Attribute, Graph, Model, Node, Tensor, ValueInfo } from '../../src/graph/ir.js';

// Tensor data lives in a few large pools (views, not one ArrayBuffer per tensor), as it does when pleat reads
// a model file: every raw_data is a view into the file's buffer.
let pool = new Float32Array(0), used = 0;
const tensor = (name: string, dims: number[], v: number): Tensor => {
  const n = dims.reduce((a, b) => a * b, 1);
  if (used + n > pool.length) { pool = new Float32Array(1 << 20); used = 0; }
  const data = pool.subarray(used, used + n).fill(v);
  used += n;
  return { name, dims, dataType: 1, storage: { kind: 'raw', bytes: new Uint8Array(data.buffer, data.byteOffset, n * 4) }, docString: '', extra: [] };
};
const vi = (name: string, shape?: number[]): ValueInfo => ({ name, elemType: 1, shape, docString: '', extra: [] });
const node = (opType: string, name: string, inputs: string[], outputs: string[], attributes: Attribute[] = []): Node =>
  ({ name, opType, domain: '', inputs, outputs, attributes, docString: '', extra: [] });

export function wideModel(target: number): Model {
  const C = 4;
  const g: Graph = { name: 'wide', nodes: [], initializers: [], inputs: [vi('x', [1, C, 4, 4])], outputs: [], valueInfo: [], docString: '', extra: [] };
  const cond = tensor('cond', [], 1);
  cond.dataType = 9;
  cond.storage = { kind: 'raw', bytes: new Uint8Array([1]) };
  g.initializers.push(cond);
  let cur = 'x', k = 0, blocks = 0; // k numbers every block (names); blocks counts main-chain blocks (schedule)
  // every layer has its own weight and statistics, as exported models do
  const block = (into: Graph, input: string, p: string): string => {
    const q = `${p}${k}`;
    into.initializers.push(tensor(`W${q}`, [C, C, 1, 1], 0.5), tensor(`s${q}`, [C], 1), tensor(`b${q}`, [C], 0), tensor(`m${q}`, [C], 0.1), tensor(`v${q}`, [C], 2));
    into.nodes.push(node('Conv', `${p}conv${k}`, [input, `W${q}`], [`${p}c${k}`]));
    into.nodes.push(node('BatchNormalization', `${p}bn${k}`, [`${p}c${k}`, `s${q}`, `b${q}`, `m${q}`, `v${q}`], [`${p}y${k}`]));
    into.nodes.push(node('Relu', `${p}relu${k}`, [`${p}y${k}`], [`${p}r${k}`]));
    return `${p}r${k++}`;
  };
  while (g.nodes.length < target) {
    cur = block(g, cur, '');
    blocks++;
    if (blocks % 10 === 0) {
      // a branch: two convolutions read the same activation and are summed
      const a = block(g, cur, 'l'), b = block(g, cur, 'r');
      g.nodes.push(node('Add', `add${k}`, [a, b], [`sum${k}`]));
      cur = `sum${k}`;
    }
    if (blocks % 100 === 0) {
      const branch = (label: string): Graph => {
        const sg: Graph = { name: `${label}${k}`, nodes: [], initializers: [], inputs: [], outputs: [], valueInfo: [], docString: '', extra: [] };
        const out = block(sg, cur, `${label}`);
        sg.outputs.push(vi(out));
        return sg;
      };
      const at = (name: string, gr: Graph): Attribute => ({ name, value: { type: 'GRAPH', g: gr }, docString: '', refAttrName: '', extra: [] });
      const out = `if_out${k}`; // named before the branches number their blocks
      g.nodes.push(node('If', `if${k}`, ['cond'], [out], [at('then_branch', branch('t')), at('else_branch', branch('e'))]));
      cur = out;
    }
  }
  g.outputs.push(vi(cur));
  return {
    irVersion: 8, opsets: [{ domain: '', version: 17, extra: [] }], producerName: 'pleat-bench', producerVersion: '1',
    domain: '', modelVersion: 0, docString: '', graph: g, metadata: [], extra: [], baseDir: '.',
  };
}

export function nodeCount(m: Model): number {
  let n = 0;
  const walk = (g: Graph) => { for (const x of g.nodes) { n++; for (const a of x.attributes) if (a.value.type === 'GRAPH') walk(a.value.g); } };
  walk(m.graph);
  return n;
}
