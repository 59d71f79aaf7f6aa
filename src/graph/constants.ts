// The tensor a Constant node holds, in any of its forms: `value`, or the scalar and list shorthands
// value_float(s) and value_int(s) (opset 12+). Shorthand values are read into a tensor built here; edits
// must not be written into it (the node would not see them), so rewrites clone such constants instead.
import { DataType, type Node, type Tensor } from './ir.js';
import { makeTensor } from './tensor.js';

const built = new WeakMap<Node, Tensor>();
const synthetic = new WeakSet<Tensor>();

export function constantNodeTensor(n: Node): Tensor | undefined {
  const cached = built.get(n);
  if (cached) return cached;
  for (const a of n.attributes) {
    const v = a.value;
    let t: Tensor | undefined;
    if (a.name === 'value' && v.type === 'TENSOR') return v.t;
    if (a.name === 'value_float' && v.type === 'FLOAT') t = makeTensor(n.outputs[0] ?? '', [], DataType.FLOAT, [v.f]);
    else if (a.name === 'value_floats' && v.type === 'FLOATS') t = makeTensor(n.outputs[0] ?? '', [v.floats.length], DataType.FLOAT, v.floats);
    else if (a.name === 'value_int' && v.type === 'INT') t = makeTensor(n.outputs[0] ?? '', [], DataType.INT64, [v.i]);
    else if (a.name === 'value_ints' && v.type === 'INTS') t = makeTensor(n.outputs[0] ?? '', [v.ints.length], DataType.INT64, v.ints);
    if (t) {
      built.set(n, t);
      synthetic.add(t);
      return t;
    }
  }
  return undefined;
}

/** True for a tensor read from a Constant node's shorthand attribute (not stored as a tensor anywhere). */
export function isShorthandConstant(t: Tensor): boolean {
  return synthetic.has(t);
}
