// A model holding every element type and storage form a bundle must carry, built with onnx-proto's own
// encoder. Each tensor's expected little-endian bytes are written down here from the values put in, not
// derived from pleat's code, so the bundle tests compare against an independent source.
import onnxProto from 'onnx-proto';
import protobuf from 'protobufjs';
import { endianness } from 'node:os';
import { GraphBuilder, T, modelBytes, randn, rng } from '../helpers/build.js';

const { onnx } = onnxProto;
// protobufjs's Long class (from the 'long' package) carries 64-bit values exactly into int64_data/uint64_data
const Long = protobuf.util.Long as unknown as { fromString(s: string): never; fromNumber(n: number, unsigned: boolean): never };

export interface Expected {
  name: string;
  dims: number[];
  type: number;
  bytes: Uint8Array;
}

if (endianness() !== 'LE') throw new Error('the bundle fixture writes typed arrays as little-endian bytes; run on a little-endian host');

const bytesOf = (a: ArrayBufferView) => new Uint8Array(a.buffer, a.byteOffset, a.byteLength).slice();

function f32Bits(bits: number[]): Float32Array {
  return new Float32Array(new Uint32Array(bits).buffer);
}

export interface Fixture {
  bytes: Uint8Array;
  expected: Expected[];
  /** Names that must be reported as skipped, with their reason. */
  skipped: Array<[string, string]>;
}

export function bundleFixture(): Fixture {
  const g = new GraphBuilder('bundle_fixture');
  const expected: Expected[] = [];
  const raw = (name: string, dims: number[], type: number, data: ArrayBufferView) => {
    const bytes = bytesOf(data);
    g.inits.push({ name, dims, dataType: type, rawData: bytes });
    expected.push({ name, dims, type, bytes });
    return name;
  };
  const typed = (name: string, dims: number[], type: number, proto: Partial<onnxProto.onnx.ITensorProto>, bytes: ArrayBufferView) => {
    g.inits.push({ name, dims, dataType: type, ...proto });
    expected.push({ name, dims, type, bytes: bytesOf(bytes) });
    return name;
  };

  // float32 with the awkward values: -0, smallest subnormal, a larger subnormal, smallest normal, largest
  // finite, +-infinity, the canonical quiet NaN, 0.1 and 1/3 (neither exact in binary)
  const w = randn(rng(11), 4 * 2 * 3 * 3, 0.5);
  const special = f32Bits([0x80000000, 0x00000001, 0x00400001, 0x00800000, 0x7f7fffff, 0x7f800000, 0xff800000, 0x7fc00000]);
  w.set(special, 0);
  w[8] = 0.1; w[9] = 1 / 3;
  g.input('x', [1, 2, 8, 8]);
  g.input('stem.conv.bias', [4]); // also an initializer: a default callers may override
  const wName = raw('stem.conv.weight', [4, 2, 3, 3], T.FLOAT, w);
  const bias = new Float32Array([0.25, -1.5, 3e-8, 1e30]);
  typed('stem.conv.bias', [4], T.FLOAT, { floatData: Array.from(bias) }, bias);
  let y = g.node('Conv', ['x', wName, 'stem.conv.bias'], { kernel_shape: [3, 3], pads: [1, 1, 1, 1] }, { name: 'stem.conv' });

  // float64, raw and double_data: -0, smallest subnormal, largest finite, pi
  const d = new Float64Array([-0, 5e-324, 1.7976931348623157e308, Math.PI, 1e-310, -2.5, 0.1, 7, 1 / 3, -1e-300, 42, 2 ** -1074 * 3]);
  raw('head/fc:weight', [3, 4], T.DOUBLE, d);
  const db = new Float64Array([0.5, -0.125, 1e100]);
  typed('head/fc:bias', [3], T.DOUBLE, { doubleData: Array.from(db) }, db);

  // float16 and bfloat16 bit patterns: 1, 65504, smallest subnormal, -0, +inf, a NaN
  raw('emb.f16', [2, 3], T.FLOAT16, new Uint16Array([0x3c00, 0x7bff, 0x0001, 0x8000, 0x7c00, 0x7e00]));
  const h = new Uint16Array([0x3555, 0xc000, 0x0400, 0xfbff]);
  typed('emb.f16_typed', [4], T.FLOAT16, { int32Data: Array.from(h) }, h);
  raw('emb.bf16', [3], T.BFLOAT16, new Uint16Array([0x3f80, 0xc2f7, 0x0001]));
  const bh = new Uint16Array([0x4049, 0xff80]);
  typed('emb.bf16_typed', [2], T.BFLOAT16, { int32Data: Array.from(bh) }, bh);

  // integers at their limits
  raw('shape.i64', [4], T.INT64, new BigInt64Array([-(2n ** 63n), 2n ** 63n - 1n, -1n, 5n]));
  const i64 = new BigInt64Array([3n, -4000000000n, 9007199254740993n]);
  typed('shape.i64_typed', [3], T.INT64, { int64Data: Array.from(i64, (v) => Long.fromString(v.toString())) }, i64);
  raw('idx.i32', [3], T.INT32, new Int32Array([-2147483648, 2147483647, 0]));
  const i32 = new Int32Array([-7, 123456]);
  typed('idx.i32_typed', [2], T.INT32, { int32Data: Array.from(i32) }, i32);
  raw('q.i16', [2], T.INT16, new Int16Array([-32768, 32767]));
  raw('q.u16', [2], T.UINT16, new Uint16Array([65535, 1]));
  raw('q.i8', [4], T.INT8, new Int8Array([-128, 127, 0, -1]));
  const i8 = new Int8Array([-5, 7]);
  typed('q.i8_typed', [2], T.INT8, { int32Data: Array.from(i8) }, i8);
  raw('q.u8', [3], T.UINT8, new Uint8Array([0, 255, 7]));
  const u8 = new Uint8Array([200, 1]);
  typed('q.u8_typed', [2], T.UINT8, { int32Data: Array.from(u8) }, u8);
  raw('mask.bool', [3], T.BOOL, new Uint8Array([1, 0, 1]));
  raw('q.u32', [2], T.UINT32, new Uint32Array([4294967295, 2147483648]));
  const u32 = new Uint32Array([4294967295, 9]);
  typed('q.u32_typed', [2], T.UINT32, { uint64Data: Array.from(u32, (v) => Long.fromNumber(v, true)) }, u32);
  raw('q.u64', [2], T.UINT64, new BigUint64Array([2n ** 64n - 1n, 3n]));

  // names that are not C identifiers, collide after cleaning, or could break out of a C comment
  raw('int', [1], T.FLOAT, new Float32Array([1.5]));
  raw('1st', [], T.FLOAT, new Float32Array([-2.75])); // rank 0
  raw('a-b', [2], T.FLOAT, new Float32Array([1, 2]));
  raw('a_b', [2], T.FLOAT, new Float32Array([3, 4]));
  raw('A_B', [2], T.FLOAT, new Float32Array([5, 6]));
  raw('größe', [1], T.FLOAT, new Float32Array([9.5]));
  raw('evil*/??/\nname', [1], T.FLOAT, new Float32Array([-0.5]));
  raw('empty', [0, 3], T.FLOAT, new Float32Array(0));

  // a Constant node's value is a weight too: it is stored under the node's output name
  const cv = new Float32Array([0.5, -0.5, 2, 4]);
  g.node('Constant', [], {
    value: { name: 'ignored_inner_name', dims: [1, 4, 1, 1], dataType: T.FLOAT, rawData: bytesOf(cv) },
  }, { name: 'scale_const', outputs: ['const.scale'] });
  expected.push({ name: 'const.scale', dims: [1, 4, 1, 1], type: T.FLOAT, bytes: bytesOf(cv) });
  y = g.node('Mul', [y, 'const.scale'], {}, { name: 'scale' });

  // a string initializer (no bundle form) and a subgraph initializer (not a main-graph weight)
  g.inits.push({ name: 'labels', dims: [2], dataType: T.STRING, stringData: [new TextEncoder().encode('ok'), new TextEncoder().encode('burnt')] });
  g.input('flag', [], T.BOOL);
  const then = new GraphBuilder('then_body');
  then.init('then.w', [1], [2]);
  then.node('Mul', [y, 'then.w'], {}, { name: 'then_mul', outputs: ['then_out'] });
  then.output('then_out');
  const other = new GraphBuilder('else_body');
  other.node('Identity', [y], {}, { name: 'else_id', outputs: ['else_out'] });
  other.output('else_out');
  g.node('If', ['flag'], { then_branch: then, else_branch: other }, { name: 'choose', outputs: ['y'] });
  g.output('y');

  const bytes = modelBytes(g);
  onnx.ModelProto.decode(bytes); // the encoder's own decoder accepts it
  return { bytes, expected, skipped: [['labels', 'dtype-unsupported'], ['then.w', 'in-subgraph']] };
}

/** FNV-1a, 64-bit (offset basis 14695981039346656037, prime 1099511628211: the published FNV constants). */
export function fnv1a64(bytes: Uint8Array): bigint {
  let h = 14695981039346656037n;
  for (const b of bytes) h = ((h ^ BigInt(b)) * 1099511628211n) & 0xffffffffffffffffn;
  return h;
}
