// The probe's memory, estimated from the shapes before anything is evaluated: every generated input's dims must
// be sizes (whole numbers, at least 0) and all of them together, in float64, must fit the probe memory limit
// (src/eval/budget.ts, which also bounds every value made during evaluation).
import { PleatError } from '../errors.js';
import { elementCount } from '../graph/ir.js';
import { formatBytes, probeMemoryLimit } from '../eval/budget.js';
import type { Graph } from '../graph/ir.js';
import { estimateRun, type Estimate } from '../eval/estimate.js';
import type { InputSpec } from './inputs.js';

export function checkProbeShapes(specs: readonly InputSpec[]): void {
  let total = 0;
  const parts: string[] = [];
  for (const s of specs) {
    if (s.given) continue; // already in memory
    s.dims.forEach((d, k) => {
      if (!Number.isSafeInteger(d) || d < 0) {
        throw new PleatError('bad-model', `input '${s.name}' dim ${k} is ${d}: a size must be a whole number of at least 0`);
      }
    });
    const bytes = elementCount(s.dims) * 8;
    total += bytes;
    parts.push(`'${s.name}' [${s.dims.join(',')}]`);
  }
  const limit = probeMemoryLimit();
  if (total > limit) {
    throw new PleatError('bad-input', `the probe inputs ${parts.join(', ')} need ${formatBytes(total)} in float64, above the probe memory limit of ${formatBytes(limit)}; lower the probe shape (--dim, --shape) or raise --max-probe-memory`);
  }
}

/**
 * Refuse a probe whose evaluation, estimated from the shapes (src/eval/estimate.ts: every value the model makes,
 * in float64, as if none were freed), goes beyond the probe memory limit: a bound on both its memory and its
 * work, known before anything runs.
 */
export function checkProbeEstimate(graph: Graph, specs: readonly InputSpec[]): Estimate {
  checkProbeShapes(specs);
  return checkEstimateFits(estimateRun(graph, new Map(specs.map((s) => [s.name, s.given ? s.given.dims : s.dims]))));
}

/** Refuse an estimate (worked out here or given) beyond the probe memory limit now in force; returns it. */
export function checkEstimateFits(e: Estimate): Estimate {
  const limit = probeMemoryLimit();
  if (e.totalBytes > limit) {
    const big = e.largest ? ` (the largest, node '${e.largest.node}', makes [${e.largest.dims.join(',')}])` : '';
    throw new PleatError('bad-input', `a probe of this model would make values of ${formatBytes(e.totalBytes)} in float64${big}, above the probe memory limit of ${formatBytes(limit)}; lower the probe shape (--dim, --shape) or raise --max-probe-memory`);
  }
  return e;
}
