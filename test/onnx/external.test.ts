// External data (ONNX external_data keys location, offset, length): refused clearly when a location is
// absolute, climbs out of the model's folder, or points past the end of its file.
import { describe, expect, it } from 'vitest';
import { closeSync, ftruncateSync, mkdtempSync, mkdirSync, openSync, symlinkSync, writeFileSync, readFileSync } from 'node:fs';
import { execFileSync, spawnSync } from 'node:child_process';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import onnxProto from 'onnx-proto';
import { GraphBuilder, modelBytes, tensor } from '../helpers/build.js';
import { CLI, pleat } from '../helpers/cli.js';

/** Run the CLI with a time limit (a FIFO once made pleat wait forever). */
function pleatWithin(args: string[]): { code: number; stderr: string } {
  const r = spawnSync(process.execPath, [CLI, ...args], { encoding: 'utf8', timeout: 20000, env: { ...process.env, NO_COLOR: '1' } });
  return { code: r.status ?? -1, stderr: r.stderr };
}
import { readModelFile } from '../../src/onnx/read.js';
import { writeModelFile } from '../../src/onnx/write.js';
import { tensorToFloat64 } from '../../src/graph/tensor.js';

function modelWith(entries: Array<[string, string]>): Uint8Array {
  const g = new GraphBuilder();
  g.input('x', [1, 4]).output('y', [1, 4]);
  const t = tensor('s', [4], [1, 2, 3, 4]);
  delete t.rawData;
  t.dataLocation = onnxProto.onnx.TensorProto.DataLocation.EXTERNAL;
  t.externalData = entries.map(([key, value]) => ({ key, value }));
  g.inits.push(t);
  g.node('Mul', ['x', 's'], {}, { outputs: ['y'] });
  return modelBytes(g);
}

function setup(): string {
  const dir = mkdtempSync(join(tmpdir(), 'pleat-ext-'));
  mkdirSync(join(dir, 'model'));
  writeFileSync(join(dir, 'model', 'w.bin'), new Uint8Array(new Float32Array([1, 2, 3, 4]).buffer));
  writeFileSync(join(dir, 'outside.bin'), new Uint8Array(16));
  return dir;
}

function refused(dir: string, entries: Array<[string, string]>, pattern: RegExp): void {
  const p = join(dir, 'model', 'm.onnx');
  writeFileSync(p, modelWith(entries));
  const r = pleat(['survey', p]);
  expect(r.code).toBe(2);
  expect(r.stderr.trim().split('\n')).toHaveLength(1);
  expect(r.stderr).toMatch(pattern);
}

describe('external data', () => {
  it('reads a side file in the model folder', () => {
    const dir = setup();
    const p = join(dir, 'model', 'm.onnx');
    writeFileSync(p, modelWith([['location', 'w.bin'], ['offset', '0'], ['length', '16']]));
    expect(Array.from(tensorToFloat64(readModelFile(p).graph.initializers[0]!))).toEqual([1, 2, 3, 4]);
    const r = pleat(['survey', p, '--json']);
    expect(JSON.parse(r.stdout).externalBytes).toBe(16);
  });
  it('refuses an absolute location', () => refused(setup(), [['location', '/etc/passwd']], /absolute external data location '\/etc\/passwd'/));
  it("refuses a location that escapes the model's folder", () => refused(setup(), [['location', '../outside.bin']], /outside the model's folder/));
  it('refuses an offset past the end of the file', () => refused(setup(), [['location', 'w.bin'], ['offset', '64']], /runs past the end of 'w.bin'/));
  it('refuses a length past the end of the file', () => refused(setup(), [['location', 'w.bin'], ['offset', '8'], ['length', '16']], /runs past the end of 'w.bin' \(16 bytes\)/));
  it('refuses a missing side file', () => refused(setup(), [['location', 'nope.bin']], /cannot be opened/));

  // issue 11 item 5: only regular files inside the model's folder, exact lengths, no byte read twice
  it('refuses a location that is a symlink out of the model folder', () => {
    const dir = setup();
    symlinkSync(join(dir, 'outside.bin'), join(dir, 'model', 'link.bin'));
    refused(dir, [['location', 'link.bin'], ['offset', '0'], ['length', '16']], /location 'link\.bin', a link to .*outside\.bin, outside the model's folder/);
  });
  it('refuses a FIFO location and a FIFO model path without waiting on them', () => {
    const dir = setup();
    execFileSync('mkfifo', [join(dir, 'model', 'pipe.bin')]);
    const p = join(dir, 'model', 'm.onnx');
    writeFileSync(p, modelWith([['location', 'pipe.bin'], ['offset', '0'], ['length', '16']]));
    let r = pleatWithin(['survey', p]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/'pipe\.bin', which is a FIFO/);
    execFileSync('mkfifo', [join(dir, 'model', 'fifo.onnx')]);
    r = pleatWithin(['survey', join(dir, 'model', 'fifo.onnx')]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/fifo\.onnx: not a regular file/);
  });
  it('refuses a folder as a location (exit 2, not 3)', () => {
    const dir = setup();
    mkdirSync(join(dir, 'model', 'sub'));
    refused(dir, [['location', 'sub'], ['offset', '0'], ['length', '16']], /'sub', which is a folder/);
  });
  it('refuses a declared length beyond what the dims need, before reading it', () => {
    const dir = setup();
    const big = join(dir, 'model', 'big.bin');
    const fd = openSync(big, 'w');
    ftruncateSync(fd, 256 * 1024 * 1024); // sparse: costs no disk
    closeSync(fd);
    refused(dir, [['location', 'big.bin'], ['offset', '0'], ['length', String(256 * 1024 * 1024)]], /declares external data length 268435456 but its dims \[4\] of float32 need 16 bytes/);
  });
  it('refuses many tensors naming one range (memory would multiply)', () => {
    const dir = setup();
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 4]);
    let prev = 'x';
    for (let i = 0; i < 3; i++) {
      const t = tensor(`s${i}`, [4], [1, 2, 3, 4]);
      delete t.rawData;
      t.dataLocation = onnxProto.onnx.TensorProto.DataLocation.EXTERNAL;
      t.externalData = [{ key: 'location', value: 'w.bin' }, { key: 'offset', value: '0' }, { key: 'length', value: '16' }];
      g.inits.push(t);
      prev = g.node('Mul', [prev, `s${i}`], {}, { outputs: [i === 2 ? 'y' : `m${i}`] });
    }
    const p = join(dir, 'model', 'm.onnx');
    writeFileSync(p, modelBytes(g));
    const r = pleat(['survey', p]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/tensors read 32 bytes from 'w\.bin', which holds 16/);
  });

  it('writes tensors above a size threshold to a side file next to the output, never over the input side file', () => {
    const dir = setup();
    const p = join(dir, 'model', 'm.onnx');
    writeFileSync(p, modelWith([['location', 'w.bin'], ['offset', '0'], ['length', '16']]));
    const before = readFileSync(join(dir, 'model', 'w.bin'));
    const m = readModelFile(p);
    const out = join(dir, 'model', 'copy.onnx');
    const r = writeModelFile(m, out);
    expect(r.sideFiles).toEqual([join(dir, 'model', 'copy.onnx.data')]);
    expect(readFileSync(join(dir, 'model', 'w.bin')).equals(before)).toBe(true);
    expect(Array.from(tensorToFloat64(readModelFile(out).graph.initializers[0]!))).toEqual([1, 2, 3, 4]);
    // a threshold above the tensor's size brings it back inline
    writeModelFile(readModelFile(p), join(dir, 'inline.onnx'), { externalThreshold: 1024 });
    expect(readModelFile(join(dir, 'inline.onnx')).graph.initializers[0]!.storage.kind).toBe('raw');
  });
});
