// The safetensors container (an open format): 8 bytes little-endian unsigned header length N, N bytes of
// UTF-8 JSON {name: {dtype, shape, data_offsets: [begin, end]}, "__metadata__": {string: string}}, then the
// tensors' bytes back to back with no holes; offsets are relative to the first byte after the header.
import { DataType, type DataTypeCode } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import type { BundleTensor } from './bundle-tensor.js';

const DTYPES: Record<number, string> = {
  [DataType.FLOAT]: 'F32', [DataType.DOUBLE]: 'F64', [DataType.FLOAT16]: 'F16', [DataType.BFLOAT16]: 'BF16',
  [DataType.INT64]: 'I64', [DataType.INT32]: 'I32', [DataType.INT16]: 'I16', [DataType.INT8]: 'I8',
  [DataType.UINT64]: 'U64', [DataType.UINT32]: 'U32', [DataType.UINT16]: 'U16', [DataType.UINT8]: 'U8',
  [DataType.BOOL]: 'BOOL',
};

/** The safetensors dtype name for an ONNX element type, or undefined when the format has none. */
export function safetensorsDtype(code: DataTypeCode): string | undefined {
  return DTYPES[code];
}

export interface SafetensorsLayout {
  /** The 8-byte length prefix and the padded JSON header. */
  head: Uint8Array;
  /** Tensors in data order, each with its [begin, end) offsets in the data section. */
  order: Array<{ tensor: BundleTensor; begin: number; end: number }>;
  /** Total file size in bytes. */
  size: number;
}

/**
 * Lay the tensors out. Data order is widest element first, then name: every tensor's byte length is a
 * multiple of its element size, so each tensor starts aligned to its own element size (the header is padded
 * to a multiple of 8, so the data section itself starts 8-aligned). Header keys are sorted.
 */
export function layoutSafetensors(tensors: BundleTensor[], metadata: Record<string, string>): SafetensorsLayout {
  // the header's `__metadata__` key holds string metadata only: a tensor of that name made a file loaders refuse
  // (and our own metadata was lost under it)
  if (tensors.some((t) => t.name === '__metadata__')) {
    throw new PleatError('bad-input', `tensor '__metadata__': safetensors reserves that name for the file's metadata, so no tensor may have it; rename the initializer, or use --bundle-format c`);
  }
  const byName = (a: BundleTensor, b: BundleTensor) => (a.name < b.name ? -1 : a.name > b.name ? 1 : 0);
  const sorted = [...tensors].sort((a, b) => b.elementBytes - a.elementBytes || byName(a, b));
  const order: SafetensorsLayout['order'] = [];
  let at = 0;
  for (const t of sorted) {
    order.push({ tensor: t, begin: at, end: at + t.bytes.byteLength });
    at += t.bytes.byteLength;
  }
  const entries = new Map<string, string>();
  const metaKeys = Object.keys(metadata).sort();
  if (metaKeys.length) {
    entries.set('__metadata__', `{${metaKeys.map((k) => `${JSON.stringify(k)}:${JSON.stringify(metadata[k])}`).join(',')}}`);
  }
  for (const o of order) {
    const t = o.tensor;
    entries.set(t.name,
      `{"data_offsets":[${o.begin},${o.end}],"dtype":${JSON.stringify(safetensorsDtype(t.dataType))},"shape":[${t.dims.join(',')}]}`);
  }
  const keys = [...entries.keys()].sort((a, b) => (a < b ? -1 : a > b ? 1 : 0));
  const json = `{${keys.map((k) => `${JSON.stringify(k)}:${entries.get(k)}`).join(',')}}`;
  const body = new TextEncoder().encode(json);
  const padded = Math.ceil(body.byteLength / 8) * 8;
  const head = new Uint8Array(8 + padded);
  new DataView(head.buffer).setBigUint64(0, BigInt(padded), true);
  head.set(body, 8);
  head.fill(0x20, 8 + body.byteLength); // the format allows trailing spaces in the header
  return { head, order, size: head.byteLength + at };
}
