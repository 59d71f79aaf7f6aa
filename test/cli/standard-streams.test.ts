// What pleat does when its standard output cannot take the text (cli/errors.ts, guardStandardStreams).
//
// A reader that closes stdout early (`pleat audit m.onnx | head -1`): pleat drops the rest of its report and ends
// as the job would have ended, with no stack trace and no exit code about the pipe; a fold still writes its model
// whole. (Node ignores SIGPIPE, so each write to the closed pipe fails with EPIPE; unhandled, that printed a stack
// trace and exited 1, which is pleat's code for a failed gate.)
import { describe, expect, it } from 'vitest';
import { spawn, spawnSync } from 'node:child_process';
import { closeSync, existsSync, mkdtempSync, openSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { CLI, ROOT, pleat } from '../helpers/cli.js';
import { longChain } from '../helpers/long-chain.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-closed-pipe-'));
const model = join(dir, 'chain.onnx');
writeFileSync(model, longChain(1500)); // reports of several pipe buffers (64 KiB each)

/**
 * Run the CLI with our end of its stdout closed before it writes anything (as `| head -1` closes it after one line;
 * closing at once makes every write meet the closed pipe, whatever the pipe's size and the timing).
 */
function runClosingEarly(args: string[]): Promise<{ code: number | null; signal: string | null; stderr: string }> {
  return new Promise((res, rej) => {
    const child = spawn(process.execPath, [CLI, ...args], {
      cwd: ROOT, env: { ...process.env, NO_COLOR: '1', CI: 'true' }, stdio: ['ignore', 'pipe', 'pipe'],
    });
    let stderr = '';
    child.stderr.setEncoding('utf8').on('data', (d: string) => { stderr += d; });
    child.stdout.destroy();
    child.on('error', rej);
    child.on('close', (code, signal) => res({ code, signal, stderr }));
  });
}

describe('stdout closed by its reader', { timeout: 120_000 }, () => {
  for (const args of [['audit', model], ['audit', model, '--json']]) {
    it(`pleat ${args[0]}${args[2] ? ` ${args[2]}` : ''} ends quietly with the job's own exit code`, async () => {
      const full = pleat([...args, '--quiet']);
      expect(Buffer.byteLength(full.stdout)).toBeGreaterThan(3 * 64 * 1024); // the reader leaves long before the end
      const r = await runClosingEarly([...args, '--quiet']);
      expect(r.stderr).toBe('');
      expect(r.signal).toBeNull();
      expect(r.code).toBe(full.code);
    });
  }

  it('a fold still writes its model whole, the same bytes as with stdout read to the end', async () => {
    const want = join(dir, 'read-to-end.onnx'), got = join(dir, 'closed-early.onnx');
    const full = pleat(['fold', model, '-o', want, '--quiet']);
    expect(full.code).toBe(0);
    expect(Buffer.byteLength(full.stdout)).toBeGreaterThan(3 * 64 * 1024);
    const r = await runClosingEarly(['fold', model, '-o', got, '--quiet']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(Buffer.compare(readFileSync(got), readFileSync(want))).toBe(0);
  });
});

// A stdout that fails for another reason (Linux's /dev/full answers every write with ENOSPC) is not a bug in
// pleat: one line naming the stream and the cause, and exit 2 (it was an internal error, exit 3, before).
describe.skipIf(!existsSync('/dev/full'))('stdout on a full disk', { timeout: 120_000 }, () => {
  for (const args of [['survey', model], ['audit', model, '--quiet']]) {
    it(`pleat ${args[0]} says so in one line and exits 2`, () => {
      const full = openSync('/dev/full', 'w');
      try {
        const r = spawnSync(process.execPath, [CLI, ...args], {
          cwd: ROOT, encoding: 'utf8', env: { ...process.env, NO_COLOR: '1', CI: 'true' }, stdio: ['ignore', full, 'pipe'],
        });
        expect(r.stderr).toBe('pleat: cannot write to standard output (ENOSPC)\n');
        expect(r.status).toBe(2);
      } finally {
        closeSync(full);
      }
    });
  }
});
