// A worker thread of src/verify/original-runs.ts: runs the original model on the seeded probes of fold's check,
// in float64, exactly as compare() would run it as model A, and posts each probe's inputs and outputs. Any failure
// is only counted (DONE = 2): compare() then runs the original itself and reports errors the usual way.
import { workerData } from 'node:worker_threads';
import type { OriginalRunsSetup } from './original-runs.js';

const DONE = 0; // as in original-runs.ts (not imported: a failure to load must still be counted)
const setup = workerData as OriginalRunsSetup;
const state = new Int32Array(setup.state);
try {
  // loaded here, not at the top, so a module that fails to load is counted as a failure like any other
  const { readModelFile } = await import('../onnx/read.js');
  const { setThreads } = await import('../eval/threads.js');
  const { withProbeMemory, probeMemoryLimit } = await import('../eval/budget.js');
  const { withGraphsHeldStill } = await import('../eval/plan.js');
  const { runLockstep } = await import('../eval/lockstep.js');
  const { checkProbeEstimate } = await import('./probe-budget.js');
  const { makeProbe, resolveInputs } = await import('./inputs.js');
  const { lowerThreadPriority } = await import('../eval/background.js');
  lowerThreadPriority(); // its results are needed only at the end (src/eval/background.ts)
  // one thread: this is the second thread beside the main one (and the kernel is bit-identical for any count)
  setThreads(1);
  const model = readModelFile(setup.input);
  const posted = withProbeMemory(setup.maxProbeMemory, () => withGraphsHeldStill(() => {
    const specs = resolveInputs(model.graph, new Map(), new Map(setup.shapes), new Map(setup.dims), []);
    const estimate = checkProbeEstimate(model.graph, specs);
    const inputs = Array.from({ length: setup.probes }, (_, p) => makeProbe(specs, setup.seed, p));
    // all probes at once when they fit in half the probe memory (each weight decoded once), else one at a time
    const together = setup.probes * estimate.totalBytes <= probeMemoryLimit() / 2;
    const outputs = together
      ? runLockstep([{ model, precision: 'float64', probes: inputs }])[0]!
      : inputs.map((one) => runLockstep([{ model, precision: 'float64', probes: [one] }])[0]![0]!);
    // each array on its own buffer (a small value may be a view into a shared slab, which a post would copy whole)
    const own = (m: Map<string, import('../eval/value.js').Value>) => [...m].map(([k, v]) => [k, { type: v.type, dims: [...v.dims], data: v.data.slice() }]);
    return inputs.map((inp, p) => ({ inputs: own(inp), outputs: own(outputs[p]!) }));
  }));
  setup.port.postMessage(posted);
  Atomics.store(state, DONE, 1);
} catch {
  Atomics.store(state, DONE, 2);
}
Atomics.notify(state, DONE);
