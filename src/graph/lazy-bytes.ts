// Tensor bytes may still sit in the model file when a tensor is decoded (the reader leaves large payloads on
// disk until something needs them). The graph layer only needs two calls for that; the file layer that knows
// where the bytes are (src/onnx/sparse-read.ts) installs them, so the graph imports nothing from the file layer.

export interface ByteBacking {
  /** Bring a view's bytes into memory (and apply changes deferred on them) before they are read. */
  ensureLoaded(view: Uint8Array): void;
  /** The view was overwritten in memory: its bytes no longer come from the file. */
  markLoaded(view: Uint8Array): void;
  /** The view's bytes with deferred changes applied, read into `into` or a fresh buffer when on disk (not kept). */
  peekBytes(view: Uint8Array, into?: Uint8Array): Uint8Array;
}

let backing: ByteBacking | undefined;

export function setByteBacking(b: ByteBacking): void {
  backing = b;
}

export function ensureLoaded(view: Uint8Array): void {
  backing?.ensureLoaded(view);
}

export function markLoaded(view: Uint8Array): void {
  backing?.markLoaded(view);
}

/**
 * A view's bytes for one read: the view itself when in memory, else a copy the caller drops after use, read into
 * `into` when it is given with the view's length (a buffer the caller reuses).
 */
export function peekBytes(view: Uint8Array, into?: Uint8Array): Uint8Array {
  return backing ? backing.peekBytes(view, into) : view;
}
