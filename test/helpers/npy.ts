// A minimal .npy (version 1.0, little-endian float32, C order) writer and reader written from NumPy's published
// format description (numpy.lib.format, "NPY format": magic \x93NUMPY, version bytes, 2-byte little-endian
// header length, a Python dict literal padded with spaces to a multiple of 64 bytes ending in \n, raw data),
// independent of pleat's own codec in src/verify/npy.ts.
/** A version 1.0 .npy of `dims` with element type `descr`, holding `data` as it is in memory (little-endian here). */
function npyBytes(descr: string, dims: number[], data: ArrayBufferView): Uint8Array {
  const shape = dims.length === 1 ? `(${dims[0]},)` : `(${dims.join(', ')})`;
  let header = `{'descr': '${descr}', 'fortran_order': False, 'shape': ${shape}, }`;
  const total = 10 + header.length + 1;
  header += ' '.repeat((64 - (total % 64)) % 64) + '\n';
  const out = new Uint8Array(10 + header.length + data.byteLength);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0], 0);
  new DataView(out.buffer).setUint16(8, header.length, true);
  out.set(new TextEncoder().encode(header), 10);
  out.set(new Uint8Array(data.buffer, data.byteOffset, data.byteLength), 10 + header.length);
  return out;
}

export function npyFloat32(dims: number[], data: Float32Array): Uint8Array {
  return npyBytes('<f4', dims, data);
}

export function readNpyHeader(bytes: Uint8Array): { descr: string; shape: number[]; dataOffset: number } {
  if (bytes[0] !== 0x93 || String.fromCharCode(...bytes.subarray(1, 6)) !== 'NUMPY') throw new Error('not an npy file');
  const major = bytes[6]!;
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const len = major === 1 ? view.getUint16(8, true) : view.getUint32(8, true);
  const start = major === 1 ? 10 : 12;
  const header = new TextDecoder().decode(bytes.subarray(start, start + len));
  const descr = /'descr':\s*'([^']+)'/.exec(header)![1]!;
  const shape = /'shape':\s*\(([^)]*)\)/.exec(header)![1]!.split(',').map((s) => s.trim()).filter(Boolean).map(Number);
  return { descr, shape, dataOffset: start + len };
}

/** A .npy of 64-bit integers ('<i8' or '<u8'), each value written exactly (same format description as above). */
export function npyInt64(dims: number[], data: BigInt64Array | BigUint64Array): Uint8Array {
  return npyBytes(data instanceof BigInt64Array ? '<i8' : '<u8', dims, data);
}
