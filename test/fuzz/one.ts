// Rerun one fuzz mutant in this process, with its stack: `node dist/test/fuzz/one.js SEED`.
import { buildBases } from './driver.js';
import { runMutant } from './worker.js';

const seed = Number(process.argv[2]);
const r = runMutant(buildBases(), seed);
console.log(JSON.stringify({ ...r, stack: undefined }, null, 2));
if (r.result === 'crash') console.log(r.stack);
