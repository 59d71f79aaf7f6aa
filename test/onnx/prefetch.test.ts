// Reading a model ahead (src/onnx/prefetch.ts): the bytes read on the thread pool are used only when the file the
// read proper opens is the file they came from, unchanged; a file changed or replaced in between is read again.
import { describe, expect, it } from 'vitest';
import { execFileSync, spawn } from 'node:child_process';
import { mkdtempSync, readFileSync, renameSync, utimesSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes } from '../helpers/build.js';
import { readModelFile } from '../../src/onnx/read.js';
import { serializeModel } from '../../src/onnx/write.js';
import { readModelAhead } from '../../src/onnx/sparse-read.js';
import { prefetchSettled, takePrefetched } from '../../src/onnx/prefetch.js';
import { statSync } from 'node:fs';

/** A small Relu chain whose last node is named `tag`, so two versions of one file differ in content. */
function chain(tag: string, n = 5): Uint8Array {
  const g = new GraphBuilder();
  g.input('x', [1, 4]).output('y', [1, 4]);
  let h = 'x';
  for (let k = 0; k < n; k++) h = g.node('Relu', [h], {}, { name: `relu${k}` });
  g.node('Relu', [h], {}, { name: tag, outputs: ['y'] });
  return modelBytes(g);
}

const dir = mkdtempSync(join(tmpdir(), 'pleat-prefetch-'));

describe('reading a model ahead', () => {
  it('hands over the bytes of an unchanged file once, and the model read from them is the file', async () => {
    const path = join(dir, 'same.onnx');
    writeFileSync(path, chain('last'));
    readModelAhead(path);
    await prefetchSettled();
    const early = takePrefetched(path, statSync(path));
    expect(early).toBeDefined();
    expect(Buffer.from(early!).equals(readFileSync(path))).toBe(true);
    expect(takePrefetched(path, statSync(path))).toBeUndefined(); // taken once

    readModelAhead(path);
    await prefetchSettled();
    const m = readModelFile(path);
    expect(m.graph.nodes.at(-1)!.name).toBe('last');
    expect(Buffer.from(serializeModel(m)).equals(readFileSync(path))).toBe(true);
    expect(takePrefetched(path, statSync(path))).toBeUndefined(); // the read took them
  });

  it('reads the file again when it was rewritten after the read ahead (same size, other bytes)', async () => {
    const path = join(dir, 'rewritten.onnx');
    writeFileSync(path, chain('aaaa'));
    readModelAhead(path);
    await prefetchSettled();
    writeFileSync(path, chain('bbbb'));
    utimesSync(path, new Date(), new Date(Date.now() + 5000)); // (a later time, whatever the clock's grain)
    expect(readModelFile(path).graph.nodes.at(-1)!.name).toBe('bbbb');
  });

  it('reads the file again when another file was renamed over the path', async () => {
    const path = join(dir, 'replaced.onnx');
    writeFileSync(path, chain('old'));
    readModelAhead(path);
    await prefetchSettled();
    const other = join(dir, 'new.onnx');
    writeFileSync(other, chain('new'));
    renameSync(other, path);
    expect(readModelFile(path).graph.nodes.at(-1)!.name).toBe('new');
  });

  it('neither waits on a FIFO nor fails on a missing file: the read proper reports both', async () => {
    const fifo = join(dir, 'pipe.onnx');
    execFileSync('mkfifo', [fifo]);
    readModelAhead(fifo);
    readModelAhead(join(dir, 'missing.onnx'));
    await prefetchSettled(); // (would hang on the FIFO without O_NONBLOCK)
    expect(() => readModelFile(fifo)).toThrow(/not a regular file/);
    expect(() => readModelFile(join(dir, 'missing.onnx'))).toThrow(/no such file/);
  });

  // The read ahead opened a FIFO (without waiting on it) and closed it: a writer waiting in open() was let through,
  // wrote into the pipe, and its data was dropped on the close, where the read proper refuses a FIFO untouched.
  it('never opens a FIFO: a writer waiting on it keeps waiting, and its data reaches the reader it waits for', async () => {
    const fifo = join(dir, 'waited.onnx');
    execFileSync('mkfifo', [fifo]);
    const writer = spawn('sh', ['-c', 'printf kept > "$0"', fifo]);
    const ended = new Promise<number | null>((res) => writer.on('exit', (code) => res(code)));
    await new Promise((res) => setTimeout(res, 200)); // (the writer is in open(), waiting for a reader)
    readModelAhead(fifo);
    await prefetchSettled();
    await new Promise((res) => setTimeout(res, 200));
    expect(writer.exitCode).toBeNull(); // still waiting: the read ahead did not open the pipe
    expect(readFileSync(fifo, 'utf8')).toBe('kept');
    expect(await ended).toBe(0);
  });
});
