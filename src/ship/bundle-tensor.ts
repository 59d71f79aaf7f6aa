// The unit every bundle writer (safetensors, C source) takes; its own module so the writers and the bundle job
// do not import each other.
import type { DataTypeCode } from '../graph/ir.js';

/** A tensor ready for a bundle: its little-endian element bytes in the tensor's own type. */
export interface BundleTensor {
  name: string;
  dims: number[];
  dataType: DataTypeCode;
  count: number;
  elementBytes: number;
  bytes: Uint8Array;
}
