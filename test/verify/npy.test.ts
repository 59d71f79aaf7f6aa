// .npy reader/writer. Byte strings are built here by hand from the format description in numpy's NEP 1
// ("A Simple File Format for NumPy Arrays") and the numpy.lib.format documentation; the cross-checks run
// Debian's numpy (python3-numpy) through /usr/bin/python3.
import { describe, expect, it } from 'vitest';
import { execFileSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { npyBytes, parseNpy, readNpy } from '../../src/verify/npy.js';
import { DataType } from '../../src/graph/ir.js';
import { PleatError } from '../../src/errors.js';

/** magic, version, little-endian header length (2 bytes for 1.x, 4 for 2.x/3.x), header text, data. */
function npyFile(major: number, header: string, data: number[], align = 64): Uint8Array {
  const prefix = major === 1 ? 10 : 12;
  let h = header;
  const total = Math.ceil((prefix + h.length + 1) / align) * align;
  h = h + ' '.repeat(total - prefix - h.length - 1) + '\n';
  const out = new Uint8Array(total + data.length);
  out.set([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, major, 0]);
  const dv = new DataView(out.buffer);
  if (major === 1) dv.setUint16(8, h.length, true); else dv.setUint32(8, h.length, true);
  for (let i = 0; i < h.length; i++) out[prefix + i] = h.charCodeAt(i);
  out.set(data, total);
  return out;
}

function errorOf(f: () => unknown): PleatError {
  try { f(); } catch (e) { return e as PleatError; }
  throw new Error('expected an error');
}

describe('parseNpy on hand-built files (NEP 1 format description)', () => {
  it('reads a version 1.0 little-endian float32 2x2 array', () => {
    // 1.0, -2.5, 0.5, 3.0 as IEEE 754 float32 little-endian: 0x3f800000, 0xc0200000, 0x3f000000, 0x40400000
    const data = [0, 0, 0x80, 0x3f, 0, 0, 0x20, 0xc0, 0, 0, 0, 0x3f, 0, 0, 0x40, 0x40];
    const v = parseNpy(npyFile(1, "{'descr': '<f4', 'fortran_order': False, 'shape': (2, 2), }", data));
    expect(v.type).toBe(DataType.FLOAT);
    expect(v.dims).toEqual([2, 2]);
    expect(Array.from(v.data)).toEqual([1, -2.5, 0.5, 3]);
  });

  it('reads big-endian int32 and float64, and old 16-byte aligned headers', () => {
    // >i4: 1 = 00 00 00 01, -2 = ff ff ff fe, 258 = 00 00 01 02
    const i4 = parseNpy(npyFile(1, "{'descr': '>i4', 'fortran_order': False, 'shape': (3,), }",
      [0, 0, 0, 1, 0xff, 0xff, 0xff, 0xfe, 0, 0, 1, 2], 16));
    expect(i4.type).toBe(DataType.INT32);
    expect(Array.from(i4.data)).toEqual([1, -2, 258]);
    // >f8 1.5 = 3f f8 00 00 00 00 00 00
    const f8 = parseNpy(npyFile(1, "{'descr': '>f8', 'fortran_order': False, 'shape': (1,), }", [0x3f, 0xf8, 0, 0, 0, 0, 0, 0]));
    expect(f8.type).toBe(DataType.DOUBLE);
    expect(Array.from(f8.data)).toEqual([1.5]);
  });

  it('reads a version 2.0 header (4-byte length) and a 3.0 header', () => {
    const data = [1, 0, 0xff, 0xff]; // <i2: 1, -1
    const v2 = parseNpy(npyFile(2, "{'descr': '<i2', 'fortran_order': False, 'shape': (2,), }", data));
    expect(Array.from(v2.data)).toEqual([1, -1]);
    const v3 = parseNpy(npyFile(3, "{'descr': '<u2', 'fortran_order': False, 'shape': (2,), }", data));
    expect(v3.type).toBe(DataType.UINT16);
    expect(Array.from(v3.data)).toEqual([1, 65535]);
  });

  it('reads float16 (IEEE binary16: 0x3c00 = 1, 0xc000 = -2, 0x3555 ~= 0.33325), bool, u1, i8, and a scalar', () => {
    const f2 = parseNpy(npyFile(1, "{'descr': '<f2', 'fortran_order': False, 'shape': (3,), }", [0, 0x3c, 0, 0xc0, 0x55, 0x35]));
    expect(f2.type).toBe(DataType.FLOAT16);
    expect(Array.from(f2.data)).toEqual([1, -2, 0.333251953125]);
    const b1 = parseNpy(npyFile(1, "{'descr': '|b1', 'fortran_order': False, 'shape': (1, 3), }", [1, 0, 1]));
    expect(b1.type).toBe(DataType.BOOL);
    expect(b1.dims).toEqual([1, 3]);
    expect(Array.from(b1.data)).toEqual([1, 0, 1]);
    const u1 = parseNpy(npyFile(1, "{'descr': '|u1', 'fortran_order': False, 'shape': (2,), }", [7, 255]));
    expect(Array.from(u1.data)).toEqual([7, 255]);
    const i8 = parseNpy(npyFile(1, "{'descr': '<i8', 'fortran_order': False, 'shape': (), }", [0xfe, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff]));
    expect(i8.type).toBe(DataType.INT64);
    expect(i8.dims).toEqual([]);
    expect(Array.from(i8.data)).toEqual([-2]);
    // keys in another order and an empty array
    const e = parseNpy(npyFile(1, "{'shape': (0, 4), 'fortran_order': False, 'descr': '<f4'}", []));
    expect(e.dims).toEqual([0, 4]);
    expect(e.data.length).toBe(0);
  });

  it('refuses fortran order, object arrays, structured arrays and short data with a one-line bad-input error naming the file', () => {
    const fo = errorOf(() => parseNpy(npyFile(1, "{'descr': '<f4', 'fortran_order': True, 'shape': (2, 2), }", new Array(16).fill(0)), 'x.npy'));
    expect(fo.kind).toBe('bad-input');
    expect(fo.message).toMatch(/^x\.npy: fortran_order=True/);
    expect(fo.message).not.toContain('\n');
    const obj = errorOf(() => parseNpy(npyFile(1, "{'descr': '|O', 'fortran_order': False, 'shape': (1,), }", new Array(8).fill(0)), 'o.npy'));
    expect(obj.kind).toBe('bad-input');
    expect(obj.message).toContain('o.npy');
    const rec = errorOf(() => parseNpy(npyFile(1, "{'descr': [('a', '<f4')], 'fortran_order': False, 'shape': (1,), }", [0, 0, 0, 0]), 'r.npy'));
    expect(rec.message).toMatch(/structured/);
    const short = errorOf(() => parseNpy(npyFile(1, "{'descr': '<f4', 'fortran_order': False, 'shape': (2,), }", [0, 0, 0, 0]), 's.npy'));
    expect(short.message).toMatch(/s\.npy: .*4 bytes .* needs 8/);
    const notNpy = errorOf(() => parseNpy(new TextEncoder().encode('hello world, not numpy'), 'h.npy'));
    expect(notNpy.message).toMatch(/h\.npy: not a \.npy file/);
  });

  it('refuses a header nested too deep as bad-input naming the file, not a stack overflow (exit 3)', () => {
    // a header only needs a dict holding a tuple; 100000 open brackets overflowed the recursive parser
    const e = errorOf(() => parseNpy(npyFile(2, '['.repeat(100000), []), 'deep.npy'));
    expect(e).toBeInstanceOf(PleatError);
    expect(e.kind).toBe('bad-input');
    expect(e.message).toMatch(/^deep\.npy: .npy header .*nested deeper than 16/);
    // the deepest a real header goes (a structured dtype's nested sub-array) still parses as before
    const rec = errorOf(() => parseNpy(npyFile(1, "{'descr': [('a', [('b', '<f4', (2, 2))])], 'fortran_order': False, 'shape': (1,), }", []), 'r.npy'));
    expect(rec.message).toMatch(/structured/);
  });

  it('takes only headers with exactly the keys descr, fortran_order and shape, fortran_order a boolean and sizes exact', () => {
    // numpy.lib.format reads a header only when its keys are exactly these three and fortran_order is a bool
    const f4 = (dict: string) => errorOf(() => parseNpy(npyFile(1, dict, new Array(8).fill(0)), 'k.npy'));
    const noOrder = f4("{'descr': '<f4', 'shape': (2,), }");
    expect(noOrder.kind).toBe('bad-input');
    expect(noOrder.message).toMatch(/^k\.npy: .npy header has no 'fortran_order' key/);
    expect(f4("{'descr': '<f4', 'fortran_order': False, }").message).toMatch(/^k\.npy: .npy header has no 'shape' key/);
    expect(f4("{'descr': '<f4', 'fortran_order': False, 'shape': (2,), 'offset': 4, }").message)
      .toMatch(/^k\.npy: .npy header has a key 'offset'/);
    expect(f4("{'descr': '<f4', 'fortran_order': False, 'shape': (2,), 'shape': (1,), }").message)
      .toMatch(/^k\.npy: .npy header gives 'shape' twice/);
    // 0 is not False: it was reported as fortran_order=True
    expect(f4("{'descr': '<f4', 'fortran_order': 0, 'shape': (2,), }").message).toMatch(/^k\.npy: .npy header's fortran_order is 0, not True or False/);
    // a size beyond 2^53 was read rounded (1e+23), and with a 0 beside it passed the byte count
    const big = errorOf(() => parseNpy(npyFile(1, "{'descr': '<f4', 'fortran_order': False, 'shape': (99999999999999999999999, 0), }", []), 'b.npy'));
    expect(big.kind).toBe('bad-input');
    expect(big.message).toMatch(/^b\.npy: .npy header's shape holds 99999999999999999999999/);
    // a well-formed header still reads
    expect(Array.from(parseNpy(npyFile(1, "{'shape': (2,), 'fortran_order': False, 'descr': '<f4'}", new Array(8).fill(0))).data)).toEqual([0, 0]);
  });

  it('readNpy names a missing file', () => {
    const e = errorOf(() => readNpy('/nonexistent/dir/a.npy'));
    expect(e.kind).toBe('bad-input');
    expect(e.message).toMatch(/\/nonexistent\/dir\/a\.npy: cannot read \(ENOENT\)/);
  });
});

describe('npyBytes', () => {
  it('writes version 1.0 with the data at a multiple of 64 and a header ending in a newline (format description)', () => {
    const b = npyBytes({ type: DataType.FLOAT, dims: [2, 3], data: new Float64Array([1, 2, 3, 4, 5, 6]) });
    expect(Array.from(b.subarray(0, 8))).toEqual([0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59, 1, 0]);
    const hl = b[8]! | (b[9]! << 8);
    expect((10 + hl) % 64).toBe(0);
    const header = new TextDecoder().decode(b.subarray(10, 10 + hl));
    expect(header.endsWith('\n')).toBe(true);
    expect(header.trim()).toBe("{'descr': '<f4', 'fortran_order': False, 'shape': (2, 3), }");
    expect(b.length).toBe(10 + hl + 24);
    expect(new DataView(b.buffer).getFloat32(10 + hl + 4, true)).toBe(2);
  });

  it('round-trips every supported type, 1-d, scalar and empty shapes', () => {
    const cases: Array<[number, number[]]> = [
      [DataType.FLOAT, [0.5, -1.25, Math.fround(3e38)]], [DataType.DOUBLE, [Math.PI, -1e-300, 0]], [DataType.FLOAT16, [1, -2, 65504]],
      [DataType.INT8, [-128, 0, 127]], [DataType.INT16, [-32768, 1, 32767]], [DataType.INT32, [-2147483648, 5, 2147483647]],
      [DataType.INT64, [-(2 ** 53) + 1, 0, 2 ** 53 - 1]], [DataType.UINT8, [0, 1, 255]], [DataType.UINT16, [0, 1, 65535]],
      [DataType.UINT32, [0, 1, 4294967295]], [DataType.UINT64, [0, 1, 2 ** 53]], [DataType.BOOL, [1, 0, 1]],
    ];
    for (const [type, vals] of cases) {
      const v = { type, dims: [3], data: new Float64Array(vals) };
      const back = parseNpy(npyBytes(v));
      expect(back.type).toBe(type);
      expect(back.dims).toEqual([3]);
      expect(Array.from(back.data)).toEqual(vals);
    }
    expect(parseNpy(npyBytes({ type: DataType.FLOAT, dims: [], data: new Float64Array([7]) })).dims).toEqual([]);
    expect(parseNpy(npyBytes({ type: DataType.FLOAT, dims: [0, 2], data: new Float64Array(0) })).dims).toEqual([0, 2]);
  });

  it('rounds float32 values on write (0.1 is stored as the nearest float32)', () => {
    const back = parseNpy(npyBytes({ type: DataType.FLOAT, dims: [1], data: new Float64Array([0.1]) }));
    expect(back.data[0]).toBe(Math.fround(0.1));
  });

  it('writes bfloat16 as float32 holding the bfloat16-rounded value', () => {
    const back = parseNpy(npyBytes({ type: DataType.BFLOAT16, dims: [1], data: new Float64Array([1.00390625]) }));
    expect(back.type).toBe(DataType.FLOAT);
    expect(back.data[0]).toBe(1); // 1 + 2^-8 is halfway between bfloat16 1 and 1+2^-7: ties to even -> 1
  });

  it('switches to version 2.0 when the header exceeds 65535 bytes', () => {
    // 22000 dims of 1 make a header of about 66000 bytes ('1, ' each); numpy itself caps arrays at 32 dims, so
    // only pleat's own reader can load this one
    const dims = new Array(22000).fill(1);
    const b = npyBytes({ type: DataType.UINT8, dims, data: new Float64Array([9]) });
    expect(b[6]).toBe(2);
    const hl = new DataView(b.buffer).getUint32(8, true);
    expect((12 + hl) % 64).toBe(0);
    const back = parseNpy(b);
    expect(back.dims.length).toBe(22000);
    expect(Array.from(back.data)).toEqual([9]);
  });
});

const PY = '/usr/bin/python3';
function hasNumpy(): boolean {
  if (!existsSync(PY)) return false;
  try { execFileSync(PY, ['-c', 'import numpy'], { stdio: 'ignore' }); return true; } catch { return false; }
}
const numpyMissing = hasNumpy() ? false : 'numpy is not importable from /usr/bin/python3 (install python3-numpy)';

describe.skipIf(numpyMissing)(`cross-check with numpy (Debian python3-numpy)${numpyMissing ? ` — SKIPPED: ${numpyMissing}` : ''}`, () => {
  const dir = mkdtempSync(join(tmpdir(), 'pleat-npy-'));

  it('reads what numpy writes (several dtypes, big-endian, versions 2.0 and 3.0, fortran refused)', () => {
    const script = `
import numpy as np
d = ${JSON.stringify(dir)}
np.save(d + '/f4.npy', np.arange(6, dtype='<f4').reshape(2, 3) / 3)
np.save(d + '/f8be.npy', np.array([[1.5, -2.25]], dtype='>f8'))
np.save(d + '/f2.npy', np.array([0.1, 65504, -3], dtype='<f2'))
np.save(d + '/i8.npy', np.array([-5, 2**40], dtype='<i8'))
np.save(d + '/u2be.npy', np.array([1, 65535], dtype='>u2'))
np.save(d + '/b.npy', np.array([True, False, True]))
np.save(d + '/scalar.npy', np.float32(2.5))
np.save(d + '/fortran.npy', np.asfortranarray(np.ones((2, 3), dtype='<f4')))
for ver in [(2, 0), (3, 0)]:
    with open(d + '/v%d.npy' % ver[0], 'wb') as fh:
        np.lib.format.write_array(fh, np.array([[1, -7]], dtype='<i4'), version=ver)
`;
    execFileSync(PY, ['-c', script]);
    const f4 = readNpy(join(dir, 'f4.npy'));
    expect(f4.dims).toEqual([2, 3]);
    expect(Array.from(f4.data)).toEqual([0, 1, 2, 3, 4, 5].map((x) => Math.fround(Math.fround(x) / 3)));
    expect(Array.from(readNpy(join(dir, 'f8be.npy')).data)).toEqual([1.5, -2.25]);
    expect(Array.from(readNpy(join(dir, 'f2.npy')).data)).toEqual([0.0999755859375, 65504, -3]);
    expect(Array.from(readNpy(join(dir, 'i8.npy')).data)).toEqual([-5, 2 ** 40]);
    expect(Array.from(readNpy(join(dir, 'u2be.npy')).data)).toEqual([1, 65535]);
    const b = readNpy(join(dir, 'b.npy'));
    expect(b.type).toBe(DataType.BOOL);
    expect(Array.from(b.data)).toEqual([1, 0, 1]);
    const s = readNpy(join(dir, 'scalar.npy'));
    expect(s.dims).toEqual([]);
    expect(Array.from(s.data)).toEqual([2.5]);
    expect(() => readNpy(join(dir, 'fortran.npy'))).toThrow(/fortran_order=True/);
    for (const v of ['v2', 'v3']) {
      const bytes = readFileSync(join(dir, `${v}.npy`));
      expect(bytes[6]).toBe(Number(v[1]));
      const got = readNpy(join(dir, `${v}.npy`));
      expect(got.dims).toEqual([1, 2]);
      expect(Array.from(got.data)).toEqual([1, -7]);
    }
  });

  it('numpy.load reads what pleat writes', () => {
    writeFileSync(join(dir, 'p_f4.npy'), npyBytes({ type: DataType.FLOAT, dims: [2, 2], data: new Float64Array([1, -2, 0.5, 1e-3]) }));
    writeFileSync(join(dir, 'p_i8.npy'), npyBytes({ type: DataType.INT64, dims: [3], data: new Float64Array([-1, 0, 2 ** 40]) }));
    writeFileSync(join(dir, 'p_b.npy'), npyBytes({ type: DataType.BOOL, dims: [2], data: new Float64Array([0, 1]) }));
    writeFileSync(join(dir, 'p_f2.npy'), npyBytes({ type: DataType.FLOAT16, dims: [], data: new Float64Array([0.1]) }));
    const script = `
import numpy as np, json
d = ${JSON.stringify(dir)}
out = {}
for k in ['p_f4', 'p_i8', 'p_b', 'p_f2']:
    a = np.load(d + '/' + k + '.npy')
    out[k] = {'dtype': a.dtype.str, 'shape': list(a.shape), 'values': [float(x) for x in a.ravel().tolist()]}
print(json.dumps(out))
`;
    const got = JSON.parse(execFileSync(PY, ['-c', script], { encoding: 'utf8' }));
    expect(got.p_f4).toEqual({ dtype: '<f4', shape: [2, 2], values: [1, -2, 0.5, Math.fround(1e-3)] });
    expect(got.p_i8).toEqual({ dtype: '<i8', shape: [3], values: [-1, 0, 2 ** 40] });
    expect(got.p_b).toEqual({ dtype: '|b1', shape: [2], values: [0, 1] });
    expect(got.p_f2).toEqual({ dtype: '<f2', shape: [], values: [0.0999755859375] });
  });

  it('pleat writes the same bytes for the same value (deterministic)', () => {
    const v = { type: DataType.FLOAT, dims: [4], data: new Float64Array([1, 2, 3, 4]) };
    writeFileSync(join(dir, 'd.npy'), npyBytes(v));
    expect(Buffer.compare(readFileSync(join(dir, 'd.npy')), Buffer.from(npyBytes(v)))).toBe(0);
  });
});
