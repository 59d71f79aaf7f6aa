// A normalization's small parameter vectors (scale, shift, mean, variance) read into float64 arrays reused from
// one norm to the next: they are only needed while its affine map is worked out, and four fresh arrays per norm
// (with the views made to read them) were a good part of what an audit of a wide graph left to the collector.
import { DataType, elementCount, rawBytesOf, type Tensor } from '../graph/ir.js';
import { tensorToFloat64 } from '../graph/tensor.js';
import { DEFER_MIN, peekBytes } from '../onnx/sparse-read.js';

const slots: Float64Array[] = [];

// Raw float32 data sits at any offset of the file's buffer: it is copied here (one memcpy) to be read aligned.
let aligned = new Float32Array(64);
let alignedBytes = new Uint8Array(aligned.buffer);

const littleEndian = new Uint8Array(Uint16Array.of(1).buffer)[0] === 1;

/**
 * The values of `t` in float64, in reused array number `slot`: valid until that slot is read again, so the caller
 * keeps none of it. The same numbers as tensorToFloat64 (float32 to float64 is exact).
 */
export function vectorInSlot(t: Tensor, slot: number): Float64Array {
  const n = elementCount(t.dims);
  let out = slots[slot];
  if (out === undefined || out.length !== n) slots[slot] = out = new Float64Array(n);
  const raw = t.dataType === DataType.FLOAT && littleEndian ? rawBytesOf(t) : undefined;
  if (raw === undefined || raw.byteLength !== n * 4) return tensorToFloat64(t, out);
  // Bytes still on disk are read for this use, not kept; a payload under DEFER_MIN never is (nothing to ask).
  const bytes = raw.byteLength < DEFER_MIN ? raw : peekBytes(raw);
  if (alignedBytes.byteLength < bytes.byteLength) {
    aligned = new Float32Array(n);
    alignedBytes = new Uint8Array(aligned.buffer);
  }
  alignedBytes.set(bytes);
  for (let i = 0; i < n; i++) out[i] = aligned[i]!;
  return out;
}
