// One TensorProto as a file of its own (.pb), the form the ONNX backend test data uses: dims, data_type, name
// and raw_data, the fields the ONNX standard's node tests carry (see their test_data_set_N/*.pb).
import type { DataTypeCode } from '../graph/ir.js';
import { makeTensor, tensorBytes } from '../graph/tensor.js';
import { Emitter, emitBytes, emitInt, emitString } from './wire.js';

/** Encode values (rounded to `dataType`'s storage) as a serialized TensorProto named `name`. */
export function encodeTensorProto(name: string, dims: readonly number[], dataType: DataTypeCode, values: ArrayLike<number>): Uint8Array {
  const t = makeTensor(name, [...dims], dataType, values);
  const e = new Emitter();
  for (const d of t.dims) emitInt(e, 1, d);
  emitInt(e, 2, t.dataType);
  emitString(e, 8, t.name);
  emitBytes(e, 9, tensorBytes(t));
  return e.finish();
}
