// The yardstick for a proven fold of the large model: the script a user would write instead of pleat. Debian's
// python3-onnx and python3-numpy load the model, fold each BatchNormalization into the Conv before it with
// numpy (W' = W * s, b' = (b - mean) * s + shift, s = scale / sqrt(var + eps), ONNX operator documentation of
// BatchNormalization), and save; then onnxruntime-node runs the original and the folded model once each on one
// probe and compares the outputs.
import { writeFileSync } from 'node:fs';
import { join } from 'node:path';

export const FOLD_SCRIPT = String.raw`
import sys
import numpy as np
import onnx
from onnx import numpy_helper

src, dst = sys.argv[1], sys.argv[2]
m = onnx.load(src)
g = m.graph
inits = {t.name: t for t in g.initializer}
readers = {}
for n in g.node:
    for i in n.input:
        readers.setdefault(i, []).append(n)
producer = {o: n for n in g.node for o in n.output}
gone = []
for bn in [n for n in g.node if n.op_type == 'BatchNormalization']:
    conv = producer.get(bn.input[0])
    if conv is None or conv.op_type != 'Conv' or len(readers[bn.input[0]]) != 1:
        continue
    eps = next((a.f for a in bn.attribute if a.name == 'epsilon'), 1e-5)
    s, shift, mean, var = (numpy_helper.to_array(inits[x]).astype(np.float64) for x in bn.input[1:5])
    k = s / np.sqrt(var + eps)
    w = numpy_helper.to_array(inits[conv.input[1]])
    w2 = (w.astype(np.float64) * k.reshape(-1, *([1] * (w.ndim - 1)))).astype(np.float32)
    b0 = numpy_helper.to_array(inits[conv.input[2]]).astype(np.float64) if len(conv.input) > 2 else np.zeros_like(k)
    b2 = ((b0 - mean) * k + shift).astype(np.float32)
    inits[conv.input[1]].CopyFrom(numpy_helper.from_array(w2, conv.input[1]))
    name = conv.name + '.bias'
    g.initializer.append(numpy_helper.from_array(b2, name))
    if len(conv.input) > 2:
        conv.input[2] = name
    else:
        conv.input.append(name)
    conv.output[0] = bn.output[0]
    gone.append(bn)
for n in gone:
    g.node.remove(n)
used = {i for n in g.node for i in n.input}
kept = [t for t in g.initializer if t.name in used]
del g.initializer[:]
g.initializer.extend(kept)
onnx.save(m, dst)
import json, resource
print(json.dumps({'folded': len(gone), 'maxRssBytes': resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024}))
`;

export function writeFoldScript(dir: string): string {
  const path = join(dir, 'yardstick-fold.py');
  writeFileSync(path, FOLD_SCRIPT);
  return path;
}
