// The audit benchmark's generator must produce what it claims: a valid graph of about the asked size with
// branches and If subgraphs (an invalid or subgraph-free graph would measure something else).
import { describe, expect, it } from 'vitest';
import { wideModel, nodeCount } from './gen-wide.js';
import { validateModel } from '../../src/graph/validate.js';
import { auditLoaded } from '../../src/jobs/audit.js';

describe('benchmark graph generator', () => {
  it('makes a valid graph with branches, If subgraphs and one finding per norm', () => {
    const m = wideModel(3000);
    expect(() => validateModel(m)).not.toThrow();
    const ops = m.graph.nodes.map((n) => n.opType);
    expect(ops.filter((o) => o === 'If').length).toBeGreaterThan(0);
    expect(ops.filter((o) => o === 'Add').length).toBeGreaterThan(0);
    const n = nodeCount(m);
    expect(n).toBeGreaterThanOrEqual(3000);
    expect(n).toBeLessThan(3100);
    const norms = n - ops.filter((o) => o === 'If' || o === 'Add').length;
    const r = auditLoaded(m, 'wide');
    expect(r.normalizations.length).toBe(norms / 3); // Conv, BatchNormalization, Relu per block
    expect(r.kept).toBe(0);
  });
});
