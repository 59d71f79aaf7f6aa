// The WebAssembly binary encoding the hand-assembled kernels share (src/eval/wasm-gemm.ts, src/fold/int8-simd.ts):
// integer encodings, sections and the opcodes they use. No toolchain and no binary blob: each kernel's
// instruction list is its source.

export function uleb(n: number): number[] {
  const out: number[] = [];
  do {
    let b = n & 0x7f;
    n >>>= 7;
    if (n !== 0) b |= 0x80;
    out.push(b);
  } while (n !== 0);
  return out;
}

export function sleb(n: number): number[] {
  const out: number[] = [];
  for (;;) {
    const b = n & 0x7f;
    n >>= 7;
    if ((n === 0 && (b & 0x40) === 0) || (n === -1 && (b & 0x40) !== 0)) { out.push(b); return out; }
    out.push(b | 0x80);
  }
}

export const vec = (items: number[][]): number[] => [...uleb(items.length), ...items.flat()];
export const section = (id: number, body: number[]): number[] => [id, ...uleb(body.length), ...body];
export const wasmName = (s: string): number[] => vec([...s].map((ch) => [ch.charCodeAt(0)]));
export const WASM_HEADER = [0x00, 0x61, 0x73, 0x6d, 0x01, 0x00, 0x00, 0x00];

// opcodes
export const LOCAL_GET = 0x20, LOCAL_SET = 0x21, LOCAL_TEE = 0x22, I32_CONST = 0x41, I32_ADD = 0x6a, I32_SUB = 0x6b, I32_MUL = 0x6c;
export const I32_LT_U = 0x49, I32_LOAD = 0x28, LOOP = 0x03, BLOCK = 0x02, END = 0x0b, BR_IF = 0x0d, VOID = 0x40, I32_EQZ = 0x45;
export const I32 = 0x7f, F32 = 0x7d, V128 = 0x7b;
export const simd = (op: number): number[] => [0xfd, ...uleb(op)];
export const V128_LOAD = 0x00, V128_STORE = 0x0b, V128_CONST = 0x0c, I8X16_SHUFFLE = 0x0d, LOAD32_SPLAT = 0x09, LOAD64_SPLAT = 0x0a;
export const F32X4_SPLAT = 0x13, F32X4_NEAREST = 0x6a, F64X2_PROMOTE_LOW_F32X4 = 0x5f;
export const F32X4_ADD = 0xe4, F32X4_SUB = 0xe5, F32X4_MUL = 0xe6, F32X4_DIV = 0xe7, F32X4_MIN = 0xe8, F32X4_MAX = 0xe9;
export const F64X2_ADD = 0xf0, F64X2_SUB = 0xf1, F64X2_MUL = 0xf2;

/**
 * A lazily made instance of a module with its own memory (exported as `mem`): the exports, with the memory as
 * `memory`, made on first call; undefined, once and for all, where the runtime cannot compile it (no SIMD).
 */
export function lazyInstance<T extends { memory: WebAssembly.Memory }>(bytes: () => Uint8Array<ArrayBuffer>): () => T | undefined {
  let made: T | null | undefined;
  return () => {
    if (made === undefined) {
      try {
        const e = new WebAssembly.Instance(new WebAssembly.Module(bytes()), {}).exports as Record<string, unknown>;
        made = { ...e, memory: e.mem } as unknown as T;
      } catch {
        made = null;
      }
    }
    return made ?? undefined;
  };
}

/**
 * A loop over `groups` vectors of 16 bytes: `body` runs with local `p` at each vector's byte offset, then p moves
 * 16 bytes on and `groups` counts down; nothing runs when groups is 0. p and groups are i32 locals.
 */
export function vectorLoop(p: number, groups: number, body: number[]): number[] {
  return [
    BLOCK, VOID, LOCAL_GET, groups, I32_EQZ, BR_IF, 0, LOOP, VOID,
    ...body,
    LOCAL_GET, p, I32_CONST, ...sleb(16), I32_ADD, LOCAL_SET, p,
    LOCAL_GET, groups, I32_CONST, 1, I32_SUB, LOCAL_TEE, groups, BR_IF, 0, END, END,
  ];
}
