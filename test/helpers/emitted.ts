// The bytes an Emitter collected, as one array (tests of the wire format read back what they wrote).
import type { Emitter } from '../../src/onnx/wire.js';

export function bytesOf(e: Emitter): Uint8Array {
  const { chunks, length } = e.take();
  const out = new Uint8Array(length);
  let o = 0;
  for (const c of chunks) { out.set(c, o); o += c.byteLength; }
  return out;
}
