// `npm run fuzz [COUNT] [FIRST_SEED]`: a long fuzz campaign (default 10,200 mutants from seed 1,000,000, clear
// of the CI test's seeds) with the same bases and per-mutant time bound as test/fuzz/fuzz.test.ts. Prints the
// counts, and each crash or timeout with its seed (rerun one with `node dist/test/fuzz/one.js SEED`).
import { runCampaign } from './driver.js';

const count = Number(process.argv[2] ?? 10200);
const first = Number(process.argv[3] ?? 1_000_000);
const r = await runCampaign(first, count, 30_000);
console.log(`fuzz: ${r.mutants} mutants (seeds ${first}..${first + count - 1}) in ${r.seconds.toFixed(1)} s`);
console.log(`  ok ${r.ok}; PleatError ${Object.values(r.pleatErrors).reduce((a, b) => a + b, 0)} (${Object.entries(r.pleatErrors).map(([k, v]) => `${k} ${v}`).join(', ')})`);
console.log(`  crashes ${r.crashes.length}; timeouts ${r.timeouts.length}; slowest mutant ${r.slowest.ms} ms (seed ${r.slowest.seed})`);
for (const c of r.crashes) console.log(`  crash seed ${c.seed} (${c.base}; ${c.what.join(', ')}): ${c.result === 'crash' ? c.message : ''}`);
for (const t of r.timeouts) console.log(`  timeout seed ${t.seed} (${t.base})`);
process.exitCode = r.crashes.length || r.timeouts.length ? 1 : 0;
