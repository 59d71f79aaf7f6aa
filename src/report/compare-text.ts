// compare's report as text: the verdict, the inputs the models ran on, then per output its metrics, its
// error budget (each model's float32 run against A in float64) and the gate that judged it.
import type { CompareReport } from '../verify/compare.js';
import { CAUTION, cosineText, numText, plural } from './format.js';
import { paint } from './paint.js';

export function compareText(r: CompareReport, a: string, b: string, colour = false): string {
  const p = paint(colour);
  const lines = [p.bold(`compare ${a} with ${b}: `) + (r.passed ? p.good('passed') : p.bad('FAILED')) + ` (${plural(r.probes, 'probe')}, seed ${r.seed})`];
  if (r.int8Weights) {
    const g = r.int8Weights.granularity === 'tensor' ? 'one scale per tensor' : 'one scale per output channel';
    lines.push(`  model B ran with 8-bit weights: ${plural(r.int8Weights.layers, 'Conv/Gemm/MatMul layer')} rounded through symmetric quantize-dequantize, ${g}`);
  }
  for (const i of r.inputs) lines.push(`  input ${i.name}  ${i.dtype} [${i.dims.join('x')}]  ${i.source === 'file' ? `from ${i.file}` : i.source === 'probe' ? 'seeded probe' : 'given value'}`);
  const w = Math.max(0, ...r.outputs.map((o) => o.name.length));
  for (const o of r.outputs) {
    const verdict = o.passed ? p.good('pass') : p.bad('FAIL');
    if (!o.metrics) {
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
  return lines.join('\n') + '\n';
}
