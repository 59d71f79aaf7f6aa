// Constant in each attribute form (value, value_float(s), value_int(s)) against onnxruntime-node, and the
// one-line error for forms pleat does not evaluate.
import { describe, expect, it } from 'vitest';
import { f, fs, tensor } from '../helpers/build.js';
import { T, vsOrt } from './ort-compare.js';
import { Constant } from '../../src/eval/kernels/constant.js';
import type { Node } from '../../src/graph/ir.js';

describe('Constant (outside check: onnxruntime-node)', () => {
  it('value tensors of several types, value_float(s) and value_int(s)', async () => {
    await vsOrt('Constant', 13, [], { value: tensor('v', [2, 2], [1.5, -2, 3.25, 0]) });
    await vsOrt('Constant', 13, [], { value: tensor('v', [3], [1, -2, 3], T.INT64, 'typed') }, [{ name: 'y', type: T.INT64 }]);
    await vsOrt('Constant', 13, [], { value: tensor('v', [2], [1.5, 2.5], T.DOUBLE) }, [{ name: 'y', type: T.DOUBLE }]);
    await vsOrt('Constant', 13, [], { value_float: f(0.25) });
    await vsOrt('Constant', 13, [], { value_floats: fs([0.5, -1.5, 2]) });
    await vsOrt('Constant', 13, [], { value_int: 7 }, [{ name: 'y', type: T.INT64 }]);
    await vsOrt('Constant', 13, [], { value_ints: [3, -4, 5] }, [{ name: 'y', type: T.INT64 }]);
  });

  it('a value_string constant stops with an unsupported-op error naming node and opset', () => {
    const node: Node = {
      name: 'c1', opType: 'Constant', domain: '', inputs: [], outputs: ['y'], docString: '', extra: [],
      attributes: [{ name: 'value_string', value: { type: 'STRING', s: new TextEncoder().encode('hi') }, docString: '', refAttrName: '', extra: [] }],
    };
    expect(() => Constant.run([], { node, opset: 13, precision: 'float64', runSubgraph: () => [] }))
      .toThrow(/node 'c1': ai.onnx.Constant at opset 13: the value_string attribute is not supported/);
  });
});
