// A graph holding a sparse_initializer (ONNX IR, GraphProto field 15: SparseTensorProto, whose `values` tensor
// names the initializer) is refused with a message that says so. Before, a node reading one was refused as reading
// a value "which no node, input or initializer defines": untrue, since onnx.checker accepts such a model and
// onnxruntime runs it.
import { describe, expect, it } from 'vitest';
import { onnx } from 'onnx-proto';
import { GraphBuilder, tensor } from '../helpers/build.js';
import { parseModel } from '../../src/onnx/read.js';
import { PleatError } from '../../src/errors.js';
import { execFileSync } from 'node:child_process';
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { CHECKER_PYTHON, checkerAvailable } from '../helpers/checker.js';

function varint(n: number): number[] {
  const out: number[] = [];
  while (n > 0x7f) { out.push((n & 0x7f) | 0x80); n = Math.floor(n / 128); }
  out.push(n);
  return out;
}

/** Field `no` (length-delimited) holding `body`. */
function lenField(no: number, body: Uint8Array): Uint8Array {
  return Uint8Array.from([...varint(no * 8 + 2), ...varint(body.length), ...body]);
}

/** A model whose node `add` reads `x` and the sparse initializers `names` (values [1, 2] at indices [0, 3] of [4]). */
function modelWithSparse(names: string[]): Uint8Array {
  const g = new GraphBuilder();
  g.input('x', [4]).output('y', [4]);
  g.node('Add', ['x', names[0]!], {}, { name: 'add', outputs: ['y'] });
  const parts: Uint8Array[] = [onnx.GraphProto.encode(g.graph()).finish()];
  for (const n of names) {
    const values = onnx.TensorProto.encode(tensor(n, [2], [1, 2])).finish();
    const indices = onnx.TensorProto.encode(tensor(`${n}.indices`, [2], [0, 3], onnx.TensorProto.DataType.INT64)).finish();
    parts.push(lenField(15, Uint8Array.from([...lenField(1, values), ...lenField(2, indices), 0x18, 4])));
  }
  const graph = Uint8Array.from(parts.flatMap((p) => [...p]));
  const head = onnx.ModelProto.encode({ irVersion: 8, opsetImport: [{ domain: '', version: 17 }] }).finish();
  return Uint8Array.from([...head, ...lenField(7, graph)]);
}

describe('sparse initializers', () => {
  it('are refused by name, as a form pleat cannot read, not as an undefined value', () => {
    const bytes = modelWithSparse(['Wsp']);
    if (checkerAvailable()) {
      // the ONNX library reads the bytes as one sparse initializer named Wsp, and its checker accepts the model
      // (the plain check: onnx 1.12's full check infers no shapes through sparse initializers)
      const path = join(mkdtempSync(join(tmpdir(), 'pleat-sparse-')), 'm.onnx');
      writeFileSync(path, bytes);
      const said = execFileSync(CHECKER_PYTHON, ['-c', 'import sys, onnx\nm = onnx.load(sys.argv[1])\nonnx.checker.check_model(m)\n'
        + 'print([s.values.name for s in m.graph.sparse_initializer])', path]).toString().trim();
      expect(said).toBe("['Wsp']");
    }
    expect(() => parseModel(bytes, '/x', 'm.onnx')).toThrow(PleatError);
    try {
      parseModel(bytes, '/x', 'm.onnx');
    } catch (e) {
      expect((e as PleatError).kind).toBe('dtype-unsupported');
      expect((e as Error).message).toBe("m.onnx: initializer 'Wsp' is stored as a sparse tensor (sparse_initializer), which pleat cannot read; store it as a dense initializer");
    }
  });

  it('counts the others', () => {
    expect(() => parseModel(modelWithSparse(['A', 'B', 'C']), '/x', 'm.onnx')).toThrow("initializer 'A' (and 2 more) is stored as a sparse tensor");
  });
});
