// compare's report as text: the verdict, the inputs the models ran on, then per output its metrics, its
// error budget (each model's float32 run against A in float64) and the gate that judged it.
import type { CompareReport } from '../verify/compare.js';
import { outputSkipped } from '../verify/status.js';
import { CAUTION, cosineText, numText, plural, joinLines } from './format.js';
import { paint } from './paint.js';

export function compareText(r: CompareReport, a: string, b: string, colour = false): string {
  const p = paint(colour);
  const verdict = r.status === 'passed' ? p.good('passed') : r.status === 'skipped' ? p.warn('skipped') + ` (${r.skipped?.reason ?? 'no-elements'})` : p.bad('FAILED');
  const lines = [p.bold(`compare ${a} with ${b}: `) + verdict + ` (${plural(r.probes, 'probe')}, seed ${r.seed})`];
  if (r.skipped) lines.push(`  ${r.skipped.message}`);
  for (const d of r.assumedDims) lines.push(`  probe dim ${d.symbol} = ${d.size} (no --dim given) for input ${d.inputs.join(', ')}`);
  const half = [['A', r.halfPrecisionWeights.a], ['B', r.halfPrecisionWeights.b]].filter(([, n]) => (n as number) > 0);
  for (const [side, n] of half) {
    lines.push(`  model ${side} stores ${plural(n as number, 'weight')} in half precision (cast to float32 where read): float32 outputs are judged by the float16 gate`);
  }
  if (r.int8Weights) {
    const g = r.int8Weights.granularity === 'tensor' ? 'one scale per tensor' : 'one scale per output channel';
    lines.push(`  model B ran with 8-bit weights: ${plural(r.int8Weights.layers, 'Conv/Gemm/MatMul layer')} rounded through symmetric quantize-dequantize, ${g}`);
  }
  for (const i of r.inputs) lines.push(`  input ${i.name}  ${i.dtype} [${i.dims.join('x')}]  ${i.source === 'file' ? `from ${i.file}` : i.source === 'probe' ? 'seeded probe' : 'given value'}`);
  const w = Math.max(0, ...r.outputs.map((o) => o.name.length));
  for (const o of r.outputs) {
    const verdict = o.passed ? p.good('pass') : outputSkipped(o.status) ? p.warn('skip') : p.bad('FAIL');
    if (!o.metrics || outputSkipped(o.status)) {
      lines.push(`  ${o.name.padEnd(w)}  ${verdict}  ${o.problem ?? o.status}`);
      continue;
    }
    const m = o.metrics;
    lines.push(`  ${o.name.padEnd(w)}  ${verdict}  maxAbs ${numText(m.maxAbs)}  maxRel ${numText(m.maxRel)}  rms ${numText(m.rms)}  cosine ${cosineText(m.cosine)}`);
    const pad = ' '.repeat(w + 2);
    if (o.budget) {
      const bu = o.budget;
      lines.push(`  ${pad}error budget: A float32 maxAbs ${numText(bu.own.maxAbs)}, B float32 maxAbs ${numText(bu.deploy.maxAbs)}, added ${numText(bu.addedAbs)}`);
    }
    if (o.gate) lines.push(`  ${pad}gate (${o.gate.source}): ${o.gate.expr}`);
  }
  lines.push(...CAUTION);
  return joinLines(lines, colour) + '\n';
}
