// A report far longer than one piece of stdout (cli/output.ts writes stdout in line-aligned pieces of some 64 KiB):
// what a pipe receives must be, byte for byte, the report the library renders and the one --report writes in one
// go, node names with multi-byte characters (a character outside the BMP, two UTF-16 units) included.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { longChain } from '../helpers/long-chain.js';
import { pleat } from '../helpers/cli.js';
import { auditFile } from '../../src/jobs/audit.js';
import { auditText } from '../../src/report/audit-text.js';
import { toJsonText } from '../../src/report/json.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-long-report-'));

describe('a long audit report on stdout', { timeout: 120_000 }, () => {
  it('is the report the library renders and the one --report writes, byte for byte', () => {
    const model = join(dir, 'chain.onnx');
    writeFileSync(model, longChain(2000));
    const text = join(dir, 'audit.txt'), json = join(dir, 'audit.json');
    const r = pleat(['audit', model, '--quiet', '--report', `text:${text}`, '--report', json]);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const report = auditFile(model);
    const want = auditText(report);
    expect(Buffer.byteLength(want)).toBeGreaterThan(4 * 64 * 1024); // four pieces or more
    expect(want).toContain('bn_förderband_Ω_🚚_0');
    expect(r.stdout).toBe(want);
    expect(readFileSync(text, 'utf8')).toBe(want);
    const j = pleat(['audit', model, '--quiet', '--json']);
    expect(j.stdout).toBe(toJsonText(report));
    expect(readFileSync(json, 'utf8')).toBe(j.stdout);
  });
});
