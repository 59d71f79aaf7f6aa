// One measured job in its own process, so peak memory (maxRSS) belongs to that job alone.
// Usage: node child.js <job> <args...>; prints one JSON line {seconds, maxRssBytes, ...}.
import { performance } from 'node:perf_hooks';
import { readModelFile } from '../../src/onnx/read.js';
import { writeModelFile } from '../../src/onnx/write.js';
// loaded before any timing starts, like read/write above: module loading is start-up, not work on the file
import { foldFile } from '../../src/jobs/fold.js';
import '../../src/jobs/with-checks.js'; // proven folds need the check modules loaded (src/jobs/check-kit.ts)

type Job = (args: string[]) => Promise<Record<string, unknown>> | Record<string, unknown>;

const jobs: Record<string, Job> = {
  'load-write': ([src, dst]) => {
    const m = readModelFile(src!);
    writeModelFile(m, dst!);
    return {};
  },
  // Folding alone (read, rewrite, write): the per-fold proofs and the whole-model check are measured apart.
  fold: ([src, dst]) => {
    const r = foldFile(src!, dst!, { noProofs: true });
    return { folded: r.normalizations.filter((n) => n.status === 'folded').length };
  },
};

/** Best of three, timing only the run (both sides load the model first). */
async function bestOf3(f: () => Promise<void> | void): Promise<number> {
  let best = Infinity;
  for (let i = 0; i < 3; i++) {
    const t0 = performance.now();
    await f();
    best = Math.min(best, (performance.now() - t0) / 1000);
  }
  return best;
}

jobs['ort-run'] = async ([path]) => {
  const ort = await import('onnxruntime-node');
  const s = await ort.InferenceSession.create(path!, { graphOptimizationLevel: 'disabled', intraOpNumThreads: 1, interOpNumThreads: 1, executionProviders: ['cpu'] });
  const x = new ort.Tensor('float32', new Float32Array(3 * 224 * 224).map((_, i) => Math.sin(i)), [1, 3, 224, 224]);
  return { runSeconds: await bestOf3(async () => { await s.run({ image: x }); }) };
};

jobs['eval-run'] = async ([path, precision]) => {
  const { runModel } = await import('../../src/eval/run.js');
  const m = readModelFile(path!);
  const data = new Float64Array(3 * 224 * 224).map((_, i) => Math.sin(i));
  const input = new Map([['image', { type: 1, dims: [1, 3, 224, 224], data: precision === 'float32' ? Float32Array.from(data) : data }]]);
  return { runSeconds: await bestOf3(() => { runModel(m, input as never, { precision: precision as 'float32' | 'float64' }); }) };
};

jobs['audit-size'] = async ([n]) => {
  const { wideModel, nodeCount } = await import('./gen-wide.js');
  const { auditLoaded } = await import('../../src/jobs/audit.js');
  const m = wideModel(Number(n));
  const nodes = nodeCount(m);
  // Yardstick for growth: one bare pass over every node's input and output names (no work at all), which
  // shows what the memory hierarchy alone does to a pass over a graph ten times larger.
  const walkSeconds = await bestOf3(() => {
    let c = 0;
    const walk = (g: typeof m.graph) => {
      for (const x of g.nodes) {
        for (const v of x.inputs) c += v.length;
        for (const v of x.outputs) c += v.length;
        for (const a of x.attributes) if (a.value.type === 'GRAPH') walk(a.value.g);
      }
    };
    walk(m.graph);
    if (c < 0) throw new Error('unreachable');
  });
  return { runSeconds: await bestOf3(() => { auditLoaded(m, 'wide'); }), nodes, walkSeconds };
};

// What `pleat audit FILE` costs: read, check and audit, in a process that did not build the file
// (write-wide makes it first, in its own process).
jobs['write-wide'] = async ([n, path]) => {
  const { wideModel } = await import('./gen-wide.js');
  writeModelFile(wideModel(Number(n)), path!);
  return {};
};
// The big benchmark models are generated in a child too: a parent that built 378 MB in memory hands its peak
// RSS down to every process it starts afterwards (Linux keeps the larger of the two across fork and exec), and
// the children's memory figures would be the generator's.
jobs['write-big'] = async ([path]) => {
  (await import('./gen-big.js')).writeBigModel(path!);
  return {};
};
jobs['write-chain'] = async ([path]) => {
  (await import('./gen-chain.js')).writeChainModel(path!);
  return {};
};
jobs['audit-file'] = async ([path]) => {
  const { auditFile } = await import('../../src/jobs/audit.js');
  return { runSeconds: await bestOf3(() => { auditFile(path!); }) };
};

// The yardstick's second half: onnxruntime-node (default session options, as a user's script would have) runs
// the original and the folded model once on one seeded probe and compares the outputs.
jobs['ort-pair'] = async ([a, b]) => {
  const ort = await import('onnxruntime-node');
  const sa = await ort.InferenceSession.create(a!);
  const sb = await ort.InferenceSession.create(b!);
  const meta = sa.inputNames[0]!;
  const dims = [1, 512, 8, 8];
  const x = new ort.Tensor('float32', new Float32Array(dims.reduce((p, d) => p * d, 1)).map((_, i) => Math.sin(i * 0.37)), dims);
  const ya = (await sa.run({ [meta]: x }))[sa.outputNames[0]!]!.data as Float32Array;
  const yb = (await sb.run({ [meta]: x }))[sb.outputNames[0]!]!.data as Float32Array;
  let maxAbs = 0;
  for (let i = 0; i < ya.length; i++) maxAbs = Math.max(maxAbs, Math.abs(ya[i]! - yb[i]!));
  return { maxAbs };
};

export async function runJob(name: string, args: string[]): Promise<void> {
  const job = jobs[name];
  if (!job) throw new Error(`unknown bench job ${name}`);
  const t0 = performance.now();
  const extra = await job(args);
  // jobs that time their own core (best of three) report it as runSeconds
  const seconds = typeof extra.runSeconds === 'number' ? extra.runSeconds : (performance.now() - t0) / 1000;
  const maxRssBytes = process.resourceUsage().maxRSS * 1024;
  process.stdout.write(JSON.stringify({ seconds, maxRssBytes, ...extra }) + '\n');
}

export function registerJob(name: string, job: Job): void { jobs[name] = job; }

const [, , name, ...args] = process.argv;
if (name && import.meta.url === `file://${process.argv[1]}`) {
  runJob(name, args).catch((e) => { console.error(e); process.exit(1); });
}
