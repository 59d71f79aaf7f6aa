// One measured job in its own process, so peak memory (maxRSS) belongs to that job alone.
// Usage: node child.js <job> <args...>; prints one JSON line {seconds, maxRssBytes, ...}.
import { performance } from 'node:perf_hooks';
import { readModelFile } from '../../src/onnx/read.js';
import { writeModelFile } from '../../src/onnx/write.js';

type Job = (args: string[]) => Promise<Record<string, unknown>> | Record<string, unknown>;

const jobs: Record<string, Job> = {
  'load-write': ([src, dst]) => {
    const m = readModelFile(src!);
    writeModelFile(m, dst!);
    return {};
  },
};

export async function runJob(name: string, args: string[]): Promise<void> {
  const job = jobs[name];
  if (!job) throw new Error(`unknown bench job ${name}`);
  const t0 = performance.now();
  const extra = await job(args);
  const seconds = (performance.now() - t0) / 1000;
  const maxRssBytes = process.resourceUsage().maxRSS * 1024;
  process.stdout.write(JSON.stringify({ seconds, maxRssBytes, ...extra }) + '\n');
}

export function registerJob(name: string, job: Job): void { jobs[name] = job; }

const [, , name, ...args] = process.argv;
if (name && import.meta.url === `file://${process.argv[1]}`) {
  runJob(name, args).catch((e) => { console.error(e); process.exit(1); });
}
