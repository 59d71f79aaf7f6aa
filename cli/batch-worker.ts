// A batch worker thread: receives jobs one at a time and answers with their outcome (see batch.ts).
import { parentPort } from 'node:worker_threads';
import { loadJob, runOne, type Job } from './batch.js';

parentPort?.on('message', (m: { index: number; job: Job }) => {
  void loadJob(m.job).then(() => parentPort!.postMessage({ index: m.index, outcome: runOne(m.job) }));
});
