// Edits that keep the lossless writer honest: anything changed in place is marked with touch(), so the
// writer re-encodes it instead of re-emitting the bytes it was read from.
import type { DataTypeCode, Tensor } from './ir.js';
import { encodeStorage } from './tensor.js';

/**
 * Mark an IR object as changed (the writer will re-encode it). Assigns rather than deletes: a tensor read from a
 * file holds its origin on its class (see FileTensor), where `delete` would not reach it.
 */
export function touch(obj: { origin?: unknown }): void {
  obj.origin = undefined;
}

/**
 * Replace a tensor's values, stored in its own type and storage form. With `inPlace`, raw bytes of the same
 * size are overwritten where they are (for tensors nobody else reads), which keeps memory near the file size.
 */
export function setTensorValues(t: Tensor, values: ArrayLike<number>, opts: { dims?: number[]; dataType?: DataTypeCode; inPlace?: boolean } = {}): void {
  const dataType = opts.dataType ?? t.dataType;
  t.storage = encodeStorage(values, dataType, t.storage, (opts.inPlace ?? false) && dataType === t.dataType);
  t.dataType = dataType;
  if (opts.dims) t.dims = [...opts.dims];
  touch(t);
}
