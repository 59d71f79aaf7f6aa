// The survey as text: one labelled line per fact, our own compact layout.
import type { SurveyReport } from '../jobs/survey.js';
import { bytesText, dimsText, joinLines } from './format.js';

export function surveyText(r: SurveyReport): string {
  const lines: string[] = [];
  const pad = (label: string) => label.padEnd(10);
  lines.push(`${r.file ?? 'model'}`);
  lines.push(`  ${pad('ir')}${r.irVersion}`);
  r.opsets.forEach((o, i) => lines.push(`  ${pad(i === 0 ? 'opsets' : '')}${o.domain} ${o.version}`));
  lines.push(`  ${pad('producer')}${r.producer.name || '(none)'}${r.producer.version ? ` ${r.producer.version}` : ''}`);
  for (const [label, list] of [['inputs', r.inputs], ['outputs', r.outputs]] as const) {
    if (!list.length) lines.push(`  ${pad(label)}(none)`);
    list.forEach((v, i) => lines.push(`  ${pad(i === 0 ? label : '')}${v.name}  ${v.type} ${dimsText(v.dims)}`));
  }
  lines.push(`  ${pad('nodes')}${r.nodeCount}${r.subgraphCount ? ` (including ${r.subgraphCount} subgraph${r.subgraphCount > 1 ? 's' : ''})` : ''}`);
  const ops = r.opCounts.map((c) => `${c.op} ${c.count}`);
  for (let i = 0; i < ops.length; i += 6) lines.push(`  ${pad('')}${ops.slice(i, i + 6).join(', ')}`);
  lines.push(`  ${pad('weights')}${r.initializers.count} initializers, ${bytesText(r.initializers.bytes)}` +
    (r.constantNodes.count ? `; ${r.constantNodes.count} Constant nodes, ${bytesText(r.constantNodes.bytes)}` : '') +
    `; external ${bytesText(r.externalBytes)}`);
  // (each name JSON-quoted: a location may hold a comma or a quote, and the line must split back into the names)
  if (r.sideFiles.length) lines.push(`  ${pad('side file')}${r.sideFiles.map((f) => JSON.stringify(f)).join(', ')}`);
  if (r.missingData.length) {
    r.missingData.forEach((m, i) => lines.push(`  ${pad(i === 0 ? 'missing' : '')}${m.tensor}: ${m.problem}`));
  }
  lines.push(`  ${pad('norms')}${r.normalizations.length ? r.normalizations.map((n) => `${n.op} ${n.count}`).join(', ') : 'no normalization nodes'}`);
  if (r.evaluator.runsAll) lines.push(`  ${pad('check')}the evaluator can run every operator (the whole-model check needs no more than input shapes)`);
  else {
    const why = { 'no-kernel': 'no kernel', random: 'random draws', 'value-form': 'a value form the evaluator does not take (sparse_value, strings)' } as const;
    lines.push(`  ${pad('check')}the evaluator cannot run these operators, so the whole-model check will be skipped:`);
    for (const g of r.evaluator.cannotRun) lines.push(`  ${pad('')}${g.op} (opset ${g.opset}) x${g.count}: ${why[g.reason]}`);
  }
  return joinLines(lines) + '\n';
}
