// Signatures of the modelled fields of each IR message. The reader records one per message; the writer
// recomputes it and re-emits the original bytes when nothing modelled has changed.
import type { Attribute, Graph, Model, Node, OpsetImport, Tensor, ValueInfo } from '../graph/ir.js';

const ID = Symbol('pleat.id');
let nextId = 1;
/** A stable identity number for an object (storage arrays, child messages), kept on the object itself. */
export function idOf(o: object): number {
  const h = o as { [ID]?: number };
  return h[ID] ??= nextId++;
}

const SEP = '\u0001';

export function tensorSig(t: Tensor): string {
  const s = t.storage;
  const data = s.kind === 'external' ? `ext:${s.entries.map((e) => e.join('=')).join(',')}:${idOf(s.bytes)}`
    : s.kind === 'raw' ? `raw:${idOf(s.bytes)}`
    : s.kind === 'empty' ? 'empty'
    : `${s.kind}:${idOf(s.values)}`;
  return [t.name, t.dims.join(','), t.dataType, t.docString, data].join(SEP);
}

function latin1(b: Uint8Array): string {
  let s = '';
  for (let i = 0; i < b.length; i++) s += String.fromCharCode(b[i]!);
  return s;
}

export function attributeSig(a: Attribute): string {
  const v = a.value;
  let val: string;
  switch (v.type) {
    case 'FLOAT': val = String(v.f); break;
    case 'INT': val = String(v.i); break;
    case 'STRING': val = latin1(v.s); break;
    case 'TENSOR': val = String(idOf(v.t)); break;
    case 'GRAPH': val = String(idOf(v.g)); break;
    case 'FLOATS': val = v.floats.join(','); break;
    case 'INTS': val = v.ints.join(','); break;
    case 'STRINGS': val = v.strings.map(latin1).join(SEP); break;
    case 'TENSORS': val = v.tensors.map(idOf).join(','); break;
    case 'GRAPHS': val = v.graphs.map(idOf).join(','); break;
    case 'OTHER': val = String(v.code); break;
  }
  return [a.name, v.type, val, a.docString, a.refAttrName].join(SEP);
}

export function nodeSig(n: Node): string {
  return [n.name, n.opType, n.domain, n.inputs.join(SEP + SEP), n.outputs.join(SEP + SEP), n.docString,
    n.attributes.map(idOf).join(',')].join(SEP);
}

export function typeSig(v: ValueInfo): string {
  return `${v.elemType ?? ''}:${v.shape === undefined ? 'none' : v.shape.map((d) => (d === null ? '?' : typeof d === 'string' ? `$${d}` : d)).join(',')}`;
}

export function valueInfoSig(v: ValueInfo): string {
  return [v.name, v.docString, typeSig(v)].join(SEP);
}

export function graphSig(g: Graph): string {
  return [g.name, g.docString, g.nodes.map(idOf).join(','), g.initializers.map(idOf).join(','),
    g.inputs.map(idOf).join(','), g.outputs.map(idOf).join(','), g.valueInfo.map(idOf).join(',')].join(SEP);
}

export function opsetSig(o: OpsetImport): string {
  return `${o.domain}${SEP}${o.version}`;
}

export function modelSig(m: Model): string {
  return [m.irVersion, m.opsets.map(idOf).join(','), m.producerName, m.producerVersion, m.domain, m.modelVersion,
    m.docString, idOf(m.graph), m.metadata.map((kv) => kv.join('=')).join(SEP)].join(SEP);
}
