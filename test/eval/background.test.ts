// Background threads (the original model's check runs, the quantization report) lower their own priority, and
// only their own: the thread that calls lowerThreadPriority gets BACKGROUND_NICE more than it had (at most 19),
// its process's main thread keeps its own. Read back from /proc/<pid>/task/<tid>/stat (field 19 is the nice value; proc(5)). Linux only.
import { describe, expect, it } from 'vitest';
import { Worker } from 'node:worker_threads';
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { ROOT } from '../helpers/cli.js';
import { BACKGROUND_NICE } from '../../src/eval/background.js';

const niceOf = (statPath: string) => {
  const s = readFileSync(statPath, 'utf8');
  return Number(s.slice(s.lastIndexOf(')') + 2).split(' ')[16]); // fields from 3 on: 19 is index 16
};

describe.runIf(process.platform === 'linux')('background thread priority', () => {
  it('lowers the calling thread only', async () => {
    const mainBefore = niceOf('/proc/thread-self/stat');
    const url = 'file://' + join(ROOT, 'dist', 'src', 'eval', 'background.js');
    const code = `
      const { parentPort } = require('node:worker_threads');
      const fs = require('node:fs');
      import(${JSON.stringify(url)}).then((m) => {
        const nice = () => { const s = fs.readFileSync('/proc/thread-self/stat', 'utf8'); return Number(s.slice(s.lastIndexOf(')') + 2).split(' ')[16]); };
        const before = nice();
        m.lowerThreadPriority();
        parentPort.postMessage({ before, after: nice() });
      });`;
    const w = new Worker(code, { eval: true });
    const got = await new Promise<{ before: number; after: number }>((res, rej) => { w.once('message', res); w.once('error', rej); });
    await w.terminate();
    expect(got.before).toBe(mainBefore);
    expect(got.after).toBe(Math.min(19, mainBefore + BACKGROUND_NICE));
    expect(niceOf('/proc/thread-self/stat')).toBe(mainBefore);
  });
});
