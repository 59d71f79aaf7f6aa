// Protobuf wire format, just enough for lossless ONNX: scan a message into fields (with byte ranges, no
// copies), and emit fields. Values stay views into the file buffer until something changes them.
import { PleatError } from '../errors.js';

export const WT_VARINT = 0, WT_I64 = 1, WT_LEN = 2, WT_I32 = 5;

export interface WireField {
  no: number;
  wt: number;
  /** Start of the tag (the field's bytes are buf[start, end)). */
  start: number;
  end: number;
  /** For LEN fields: payload range; for fixed fields: value range; for varints: the varint range. */
  vstart: number;
  vend: number;
}

export class WireError extends PleatError {
  constructor(message: string) { super('bad-model', message); }
}

let varintEnd = 0;

/** Decode a varint at pos; returns [value as a JS number (exact below 2^53; int64 negatives sign-corrected), next pos]. */
export function readVarint(buf: Uint8Array, pos: number, end: number): [number, number] {
  const v = varintAt(buf, pos, end);
  return [v, varintEnd];
}

/** readVarint without the tuple: the position after the varint is left in `varintEnd` (decoding calls it per value). */
function varintAt(buf: Uint8Array, pos: number, end: number): number {
  if (pos < end) {
    const b = buf[pos]!;
    if (b < 0x80) { varintEnd = pos + 1; return b; } // the common case: one byte
  }
  let lo = 0, hi = 0, shift = 0, b: number;
  // low 28 bits
  do {
    if (pos >= end) throw new WireError('truncated varint');
    b = buf[pos++]!;
    if (shift < 28) lo |= (b & 0x7f) << shift;
    else if (shift === 28) { lo |= (b & 0x0f) << 28; hi |= (b & 0x7f) >> 4; }
    else hi |= (b & 0x7f) << (shift - 32);
    shift += 7;
    if (shift > 70) throw new WireError('varint too long');
  } while (b & 0x80);
  varintEnd = pos;
  lo >>>= 0;
  if (hi & 0x80000000) {
    // negative int64 (two's complement over 64 bits)
    const nlo = (~lo + 1) >>> 0;
    const nhi = (~hi + (nlo === 0 ? 1 : 0)) >>> 0;
    return -(nhi * 4294967296 + nlo);
  }
  return (hi >>> 0) * 4294967296 + lo;
}

/** Decode a varint as a BigInt (for int64 values that must keep every bit). */
export function readVarintBig(buf: Uint8Array, pos: number, end: number): [bigint, number] {
  let v = 0n, shift = 0n, b: number;
  do {
    if (pos >= end) throw new WireError('truncated varint');
    b = buf[pos++]!;
    v |= BigInt(b & 0x7f) << shift;
    shift += 7n;
  } while (b & 0x80);
  return [BigInt.asIntN(64, v), pos];
}

/**
 * An unsigned varint below 2^53 at pos (tags and lengths); the position after it is left in `varintEnd`.
 * No tuple is returned: scanning runs once per field of every message, and the allocation showed.
 */
function readLength(buf: Uint8Array, pos: number, end: number): number {
  if (pos < end) {
    const b = buf[pos]!;
    if (b < 0x80) { varintEnd = pos + 1; return b; } // the common case: one byte
  }
  let v = 0, mul = 1, b: number;
  do {
    if (pos >= end) throw new WireError('truncated varint');
    b = buf[pos++]!;
    v += (b & 0x7f) * mul;
    mul *= 128;
    if (mul > 2 ** 70) throw new WireError('varint too long');
  } while (b & 0x80);
  if (v > Number.MAX_SAFE_INTEGER) throw new WireError('varint out of range');
  varintEnd = pos;
  return v;
}

/**
 * The fields of buf[start, end), one at a time: next() fills no/wt/start/end/vstart/vend in place. Decoding
 * walks every field of every message, so this keeps one object per message rather than one per field (a
 * graph of many small nodes allocated several times its file size otherwise). Throws WireError on malformed
 * or truncated bytes.
 */
export class FieldCursor implements WireField {
  no = 0;
  wt = 0;
  start = 0;
  end = 0;
  vstart = 0;
  vend = 0;
  private pos: number;

  constructor(private readonly buf: Uint8Array, start: number, private readonly limit: number) {
    this.pos = start;
  }

  /** Where the next field starts (after a throwing next(), the start of the field that failed). */
  get at(): number { return this.pos; }

  next(): boolean {
    const buf = this.buf, end = this.limit;
    let pos = this.pos;
    if (pos >= end) return false;
    const fstart = pos;
    const tag = readLength(buf, pos, end);
    pos = varintEnd;
    const no = Math.floor(tag / 8), wt = tag % 8;
    if (no === 0) throw new WireError('field number 0');
    let vstart = pos, vend: number;
    switch (wt) {
      case WT_VARINT: {
        while (true) {
          if (pos >= end) throw new WireError('truncated varint');
          if (!(buf[pos++]! & 0x80)) break;
        }
        vend = pos;
        break;
      }
      case WT_I64: vend = pos + 8; pos = vend; break;
      case WT_I32: vend = pos + 4; pos = vend; break;
      case WT_LEN: {
        const len = readLength(buf, pos, end);
        pos = varintEnd;
        vstart = pos;
        vend = pos + len;
        pos = vend;
        break;
      }
      default: throw new WireError(`unsupported wire type ${wt}`);
    }
    if (vend > end) throw new WireError('field runs past the end of its message (truncated file?)');
    this.no = no; this.wt = wt; this.start = fstart; this.end = pos; this.vstart = vstart; this.vend = vend;
    this.pos = pos;
    return true;
  }
}

export function fieldsOf(buf: Uint8Array, start: number, end: number): FieldCursor {
  return new FieldCursor(buf, start, end);
}

// Node's native UTF-8 slice (what Buffer#toString calls): about twice as fast as TextDecoder on the many short
// names of a large graph, and no subarray per string. Both replace invalid sequences with U+FFFD.
const utf8Slice = (Buffer.prototype as unknown as { utf8Slice?: (this: Uint8Array, start: number, end: number) => string }).utf8Slice;
const utf8d = new TextDecoder('utf-8');
export function readString(buf: Uint8Array, f: WireField): string {
  return readStringAt(buf, f.vstart, f.vend);
}

/** The text of buf[start, end) (UTF-8; invalid sequences become U+FFFD). */
export function readStringAt(buf: Uint8Array, start: number, end: number): string {
  return utf8Slice ? utf8Slice.call(buf, start, end) : utf8d.decode(buf.subarray(start, end));
}

function decodeRange(buf: Uint8Array, start: number, end: number): string {
  if (end - start <= 12) {
    const ascii = shortAscii(buf, start, end);
    if (ascii !== undefined) return ascii;
  }
  return readStringAt(buf, start, end);
}

const fromCodes = String.fromCharCode;

/**
 * A short ASCII name made in JavaScript: the native decoder costs a call into C++ each (some 600 instructions
 * before the first byte), and a graph of 10^5 nodes decodes several hundred thousand names of a few characters.
 */
function shortAscii(b: Uint8Array, s: number, end: number): string | undefined {
  let or = 0;
  for (let i = s; i < end; i++) or |= b[i]!;
  if (or >= 0x80) return undefined;
  switch (end - s) {
    case 0: return '';
    case 1: return fromCodes(b[s]!);
    case 2: return fromCodes(b[s]!, b[s + 1]!);
    case 3: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!);
    case 4: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!);
    case 5: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!);
    case 6: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!);
    case 7: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!, b[s + 6]!);
    case 8: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!, b[s + 6]!, b[s + 7]!);
    case 9: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!, b[s + 6]!, b[s + 7]!, b[s + 8]!);
    case 10: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!, b[s + 6]!, b[s + 7]!, b[s + 8]!, b[s + 9]!);
    case 11: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!, b[s + 6]!, b[s + 7]!, b[s + 8]!, b[s + 9]!, b[s + 10]!);
    case 12: return fromCodes(b[s]!, b[s + 1]!, b[s + 2]!, b[s + 3]!, b[s + 4]!, b[s + 5]!, b[s + 6]!, b[s + 7]!, b[s + 8]!, b[s + 9]!, b[s + 10]!, b[s + 11]!);
    default: return undefined;
  }
}

/** Slots of the name cache: small enough to stay in the processor's cache (a big table missed it on every look-up). */
const NAME_SLOTS = 8192;

/**
 * Decodes names while a model is read, giving back the string made last time for the same bytes when it is still
 * in a small cache. A graph repeats op types and attribute names on every node and spells a value's name again
 * at the nodes that read it, usually soon after the one that writes it: decoding each occurrence made a new
 * string, so a 10^5-node graph held far more strings than names (more to allocate and for the garbage collector
 * to copy). A direct-mapped cache keyed by the bytes catches most repeats at the cost of hashing a few bytes; a
 * table of every name was slower than decoding (a look-up in a table of 10^5 names misses the processor's cache).
 */
export class NameCache {
  private readonly starts = new Int32Array(NAME_SLOTS);
  private readonly lens = new Int32Array(NAME_SLOTS); // 0: empty slot (the empty name is never cached)
  private readonly strings: string[] = new Array<string>(NAME_SLOTS).fill('');

  constructor(readonly buf: Uint8Array) {}

  name(start: number, end: number): string {
    const len = end - start;
    if (len === 0) return '';
    const buf = this.buf;
    let h = len;
    for (let i = start; i < end; i++) h = Math.imul(h ^ buf[i]!, 0x01000193);
    h = (h ^ (h >>> 13)) & (NAME_SLOTS - 1);
    if (this.lens[h] === len) {
      const s = this.starts[h]!;
      let j = 0;
      while (j < len && buf[s + j] === buf[start + j]) j++;
      if (j === len) return this.strings[h]!;
    }
    const str = decodeRange(buf, start, end);
    this.starts[h] = start; this.lens[h] = len; this.strings[h] = str;
    return str;
  }
}

export function readInt(buf: Uint8Array, f: WireField): number {
  if (f.wt !== WT_VARINT) throw new WireError(`field ${f.no}: expected a varint`);
  return varintAt(buf, f.vstart, f.vend);
}

export function readFloat(buf: Uint8Array, f: WireField): number {
  if (f.wt !== WT_I32) throw new WireError(`field ${f.no}: expected a 32-bit float`);
  return new DataView(buf.buffer, buf.byteOffset + f.vstart, 4).getFloat32(0, true);
}

/** Repeated varints, packed or not (protobuf readers must accept both). */
export function readPackedVarints(buf: Uint8Array, f: WireField, into: number[]): void {
  if (f.wt === WT_VARINT) { into.push(varintAt(buf, f.vstart, f.vend)); return; }
  let pos = f.vstart;
  while (pos < f.vend) { into.push(varintAt(buf, pos, f.vend)); pos = varintEnd; }
}

export function readPackedVarintsBig(buf: Uint8Array, f: WireField, into: bigint[]): void {
  if (f.wt === WT_VARINT) { into.push(readVarintBig(buf, f.vstart, f.vend)[0]); return; }
  let pos = f.vstart;
  while (pos < f.vend) { let v: bigint; [v, pos] = readVarintBig(buf, pos, f.vend); into.push(v); }
}

export function readPackedFixed32(buf: Uint8Array, f: WireField, into: number[], float: boolean): void {
  const dv = new DataView(buf.buffer, buf.byteOffset);
  if (f.wt === WT_I32) { into.push(float ? dv.getFloat32(f.vstart, true) : dv.getInt32(f.vstart, true)); return; }
  if ((f.vend - f.vstart) % 4) throw new WireError(`field ${f.no}: packed 32-bit data of odd length`);
  for (let p = f.vstart; p < f.vend; p += 4) into.push(float ? dv.getFloat32(p, true) : dv.getInt32(p, true));
}

export function readPackedFixed64(buf: Uint8Array, f: WireField, into: number[]): void {
  const dv = new DataView(buf.buffer, buf.byteOffset);
  if (f.wt === WT_I64) { into.push(dv.getFloat64(f.vstart, true)); return; }
  if ((f.vend - f.vstart) % 8) throw new WireError(`field ${f.no}: packed 64-bit data of odd length`);
  for (let p = f.vstart; p < f.vend; p += 8) into.push(dv.getFloat64(p, true));
}

// ---- writing ------------------------------------------------------------------------------------------

const SCRATCH_MAX = 64 * 1024;

/** Collects output as a list of chunks; big payloads are referenced, never copied. */
export class Emitter {
  chunks: Uint8Array[] = [];
  length = 0;
  // Small fields collect in a scratch buffer that starts small and doubles as needed; a flush keeps a copy of
  // the bytes used, so a written model of many small messages holds its own size, not a buffer per message.
  private scratch = new Uint8Array(64);
  private used = 0;

  private flushScratch(): void {
    if (this.used > 0) {
      this.chunks.push(this.scratch.slice(0, this.used));
      this.used = 0;
    }
  }

  private room(n: number): void {
    if (this.used + n <= this.scratch.length) return;
    if (this.used + n <= SCRATCH_MAX) {
      let size = this.scratch.length * 2;
      while (size < this.used + n) size *= 2;
      const next = new Uint8Array(size);
      next.set(this.scratch.subarray(0, this.used));
      this.scratch = next;
      return;
    }
    this.flushScratch();
    if (n > this.scratch.length) this.scratch = new Uint8Array(n);
  }

  bytes(b: Uint8Array): void {
    if (b.byteLength <= 256) {
      this.room(b.byteLength);
      this.scratch.set(b, this.used);
      this.used += b.byteLength;
    } else {
      this.flushScratch();
      this.chunks.push(b);
    }
    this.length += b.byteLength;
  }

  varint(v: number): void {
    this.room(10);
    const s = this.scratch;
    const start = this.used;
    if (v < 0) {
      // int64 two's complement: 10 bytes
      let big = BigInt.asUintN(64, BigInt(v));
      for (let i = 0; i < 10; i++) {
        const b = Number(big & 0x7fn);
        big >>= 7n;
        s[this.used++] = big ? b | 0x80 : b;
        if (!big) break;
      }
    } else {
      while (v >= 128) {
        s[this.used++] = (v % 128) | 0x80;
        v = Math.floor(v / 128);
      }
      s[this.used++] = v;
    }
    this.length += this.used - start;
  }

  varintBig(v: bigint): void {
    let big = BigInt.asUintN(64, v);
    this.room(10);
    const start = this.used;
    do {
      const b = Number(big & 0x7fn);
      big >>= 7n;
      this.scratch[this.used++] = big ? b | 0x80 : b;
    } while (big);
    this.length += this.used - start;
  }

  tag(no: number, wt: number): void { this.varint(no * 8 + wt); }

  /**
   * A length-prefixed string of at most 128 characters written straight into the scratch buffer when every
   * character is ASCII (its UTF-8 bytes are its character codes); false, with nothing written, otherwise.
   */
  ascii(s: string): boolean {
    const n = s.length;
    for (let i = 0; i < n; i++) if (s.charCodeAt(i) >= 0x80) return false;
    this.varint(n);
    this.room(n);
    const sc = this.scratch;
    let u = this.used;
    for (let i = 0; i < n; i++) sc[u++] = s.charCodeAt(i);
    this.used = u;
    this.length += n;
    return true;
  }

  fixed32f(v: number): void {
    this.room(4);
    new DataView(this.scratch.buffer).setFloat32(this.used, v, true);
    this.used += 4;
    this.length += 4;
  }

  /** Take the chunks emitted so far without joining them (big payloads stay views). */
  take(): { chunks: Uint8Array[]; length: number } {
    this.flushScratch();
    return { chunks: this.chunks, length: this.length };
  }

  /** Take everything emitted so far as one array (for small messages whose length must be known first). */
  finish(): Uint8Array {
    this.flushScratch();
    if (this.chunks.length === 1) return this.chunks[0]!;
    const out = new Uint8Array(this.length);
    let o = 0;
    for (const c of this.chunks) { out.set(c, o); o += c.byteLength; }
    return out;
  }
}

const utf8e = new TextEncoder();

export function emitString(e: Emitter, no: number, s: string): void {
  e.tag(no, WT_LEN);
  if (s.length <= 128 && e.ascii(s)) return; // names: written in place, no encoded copy made first
  const b = utf8e.encode(s);
  e.varint(b.byteLength); e.bytes(b);
}

export function emitBytes(e: Emitter, no: number, b: Uint8Array): void {
  e.tag(no, WT_LEN); e.varint(b.byteLength); e.bytes(b);
}

export function emitInt(e: Emitter, no: number, v: number): void {
  e.tag(no, WT_VARINT); e.varint(v);
}

export function emitFloat(e: Emitter, no: number, v: number): void {
  e.tag(no, WT_I32); e.fixed32f(v);
}

/** A length-delimited sub-message made of chunks (its size is the sum of the chunks). */
export function emitMessage(e: Emitter, no: number, chunks: Uint8Array[], size: number): void {
  e.tag(no, WT_LEN); e.varint(size);
  for (const c of chunks) e.bytes(c);
}
