// Large graphs give ledgers of 10^5 entries and more: the text and Markdown renderers must lay them out without
// spreading one argument per entry into a call (Math.max(...widths), lines.push(...lines) overflow the call stack
// at some 10^5 arguments, and the command then failed as a bug). Checked against the small report's own layout.
import { describe, expect, it } from 'vitest';
import { auditText } from '../../src/report/audit-text.js';
import { foldText } from '../../src/report/ledger-text.js';
import { auditMarkdown, foldMarkdown } from '../../src/report/markdown.js';
import { auditReport, foldReport } from './fixtures.js';

const N = 200_000;

function many<T extends { node: string }>(entries: readonly T[]): T[] {
  const out: T[] = [];
  for (let i = 0; i < N; i++) {
    const e = entries[i % entries.length]!;
    out.push({ ...e, node: `${e.node}_${i}` });
  }
  return out;
}

describe('ledgers of many entries', () => {
  it('audit: text and Markdown hold every entry', { timeout: 120_000 }, () => {
    const small = auditReport();
    const big = auditReport({ normalizations: many(small.normalizations) });
    const text = auditText(big);
    expect(text.split('\n').length - auditText(small).split('\n').length).toBe(N - small.normalizations.length);
    // the widest name sets the column: the last entry's line is padded to it like the others
    const widest = `conv1_bn_${N - 2}`.length;
    expect(text).toContain(`conv1_bn_0${' '.repeat(widest - 'conv1_bn_0'.length)}  BatchNormalization`);
    expect(auditMarkdown(big).split('\n').length - auditMarkdown(small).split('\n').length).toBe(N - small.normalizations.length);
  });

  it('fold: text and Markdown hold every entry', { timeout: 120_000 }, () => {
    const small = foldReport();
    const big = foldReport({ normalizations: many(small.normalizations) });
    const lines = foldText(big).split('\n').length;
    expect(lines - foldText(small).split('\n').length).toBe(N - small.normalizations.length);
    expect(foldMarkdown(big).split('\n').length).toBeGreaterThan(N * 3 / 4);
  });
});
