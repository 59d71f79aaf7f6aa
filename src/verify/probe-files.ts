// --save-probes DIR: the probes a check ran and the original model's outputs on them, in the layout of the ONNX
// standard's backend node tests (onnx/backend/test/data/node/*/test_data_set_N/input_K.pb, output_K.pb: one
// serialized TensorProto per file, named after the graph input or output), so a device team can replay the check
// on their own runtime with the folded model.
//
// DIR/test_data_set_N/   input_K.pb  the probe inputs, in graph-input order, in each input's element type
//                        output_K.pb the original model evaluated in float64, rounded once to each output's
//                                    element type: the reference a replay is judged against
// DIR/float32/test_data_set_N/  the same inputs; outputs of the original evaluated in float32 arithmetic (the
//                        rounding an exact float32 runtime has on its own; the gap between the two sets is it)
import { mkdirSync, readdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import type { Graph } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import { encodeTensorProto } from '../onnx/tensor-file.js';
import type { ProbeRecord } from './compare.js';

/** Refuse a folder that already holds files: stale sets from an earlier run would be replayed as if new. */
export function checkProbeDir(dir: string): void {
  let entries: string[];
  try {
    entries = readdirSync(dir);
  } catch (e) {
    if ((e as NodeJS.ErrnoException).code === 'ENOENT') return;
    throw new PleatError('bad-input', `--save-probes ${dir}: cannot read the folder (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  if (entries.length) throw new PleatError('usage', `--save-probes ${dir}: the folder is not empty; give a new or empty folder`);
}

/** Write every probe; returns the number of sets written. */
export function saveProbeSets(dir: string, graph: Graph, records: readonly ProbeRecord[]): number {
  checkProbeDir(dir);
  const write = (sub: string, file: string, bytes: Uint8Array) => {
    mkdirSync(sub, { recursive: true });
    writeFileSync(join(sub, file), bytes);
  };
  try {
    records.forEach((r, n) => {
      const main = join(dir, `test_data_set_${n}`);
      const f32 = join(dir, 'float32', `test_data_set_${n}`);
      let k = 0;
      for (const i of graph.inputs) {
        const v = r.inputs.get(i.name);
        if (!v) continue; // an input left at its initializer default
        const bytes = encodeTensorProto(i.name, v.dims, v.type, v.data);
        write(main, `input_${k}.pb`, bytes);
        write(f32, `input_${k}.pb`, bytes);
        k++;
      }
      graph.outputs.forEach((o, k2) => {
        const a = r.float64.get(o.name)!, b = r.float32.get(o.name)!;
        write(main, `output_${k2}.pb`, encodeTensorProto(o.name, a.dims, a.type, a.data));
        write(f32, `output_${k2}.pb`, encodeTensorProto(o.name, b.dims, b.type, b.data));
      });
    });
  } catch (e) {
    if (e instanceof PleatError) throw e;
    throw new PleatError('bad-input', `--save-probes ${dir}: cannot write (${(e as NodeJS.ErrnoException).code ?? String(e)})`);
  }
  return records.length;
}
