// --save-probes DIR and provenance, through the built CLI. The layout is the ONNX standard's backend node tests'
// (onnx/backend/test/data/node/<case>/test_data_set_N/input_K.pb, output_K.pb; real examples in
// /work/shared/onnx-conformance): each file one serialized TensorProto named after the graph input or output.
// Outside checks: the ONNX Python library (Debian's python3-onnx) reads every file as a TensorProto and the
// folded model's metadata_props; onnxruntime-node (graph optimizations disabled) replays the saved inputs on the
// folded model and on the original, and its outputs match output_K.pb within the default float32 gate.
import { describe, expect, it } from 'vitest';
import { spawnSync } from 'node:child_process';
import { createHash } from 'node:crypto';
import { chmodSync, existsSync, mkdirSync, mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ROOT, pleat } from '../helpers/cli.js';
import { runOrt } from '../helpers/ort.js';
import { loadInputFile } from '../../src/verify/inputs.js';
import { computeMetrics } from '../../src/verify/metrics.js';
import { DEFAULT_GATES, METRIC_NAMES, parseGate } from '../../src/verify/gate.js';

const dir = mkdtempSync(join(tmpdir(), 'pleat-save-probes-'));
const SORTER = join(ROOT, 'models', 'tray-sorter.onnx');

function python(code: string): string {
  const r = spawnSync('/usr/bin/python3', ['-c', code], { encoding: 'utf8' });
  if (r.status !== 0) throw new Error(r.stderr);
  return r.stdout;
}

describe('--save-probes and provenance', { timeout: 240_000 }, () => {
  it('fold writes the probes in the ONNX backend test-data layout; onnxruntime-node replays them within the float32 gate', async () => {
    const probes = join(dir, 'probes');
    const out = join(dir, 'sorter.onnx');
    const r = pleat(['fold', SORTER, '-o', out, '--save-probes', probes, '--json']);
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    const j = JSON.parse(r.stdout);
    expect(j.check.status).toBe('passed');
    expect(j.probesSaved).toEqual({ dir: probes, sets: j.check.probes });
    const sets = readdirSync(probes).filter((d) => d.startsWith('test_data_set_')).sort();
    expect(sets).toEqual(Array.from({ length: j.check.probes }, (_, n) => `test_data_set_${n}`));
    for (const s of sets) {
      expect(readdirSync(join(probes, s)).sort()).toEqual(['input_0.pb', 'output_0.pb', 'output_1.pb']);
      expect(readdirSync(join(probes, 'float32', s)).sort()).toEqual(['input_0.pb', 'output_0.pb', 'output_1.pb']);
    }
    // the ONNX library reads each file as a TensorProto named after the graph value
    const seen = JSON.parse(python(`
import json, onnx
from onnx import numpy_helper
out = []
for f in ['input_0.pb', 'output_0.pb', 'output_1.pb']:
    t = onnx.load_tensor(${JSON.stringify(join(probes, 'test_data_set_0'))} + '/' + f)
    out.append([t.name, t.data_type, list(t.dims), numpy_helper.to_array(t).size])
print(json.dumps(out))`));
    expect(seen).toEqual([['image', 1, [1, 3, 64, 64], 12288], ['class_logits', 1, [1, 4], 4], ['tray_offset', 1, [1, 2], 2]]);

    const gate = parseGate(DEFAULT_GATES.float32, [...METRIC_NAMES]);
    const names = ['class_logits', 'tray_offset'];
    for (const s of sets) {
      const input = loadInputFile(join(probes, s, 'input_0.pb'));
      const feeds = { image: { dims: input.dims, data: Float32Array.from(input.data) } };
      for (const model of [out, SORTER]) {
        const res = await runOrt(model, feeds);
        names.forEach((name, k) => {
          for (const ref of [join(probes, s, `output_${k}.pb`), join(probes, 'float32', s, `output_${k}.pb`)]) {
            const want = loadInputFile(ref);
            expect(res[name]!.dims).toEqual(want.dims);
            const m = computeMetrics(res[name]!.data, want.data);
            expect(m.count).toBeGreaterThan(0);
            expect(gate.test({ ...m })).toBe(true);
          }
        });
      }
    }
  });

  it('the folded model records provenance in metadata_props; two runs give identical bytes (model and probes)', () => {
    const a = join(dir, 'a', 'sorter.onnx'), b = join(dir, 'b', 'sorter.onnx');
    mkdirSync(join(dir, 'a')); mkdirSync(join(dir, 'b'));
    expect(pleat(['fold', SORTER, '-o', a, '--save-probes', join(dir, 'a', 'probes')]).code).toBe(0);
    expect(pleat(['fold', SORTER, '-o', b, '--save-probes', join(dir, 'b', 'probes')]).code).toBe(0);
    expect(Buffer.compare(readFileSync(a), readFileSync(b))).toBe(0);
    const files = (root: string) => readdirSync(root, { recursive: true, withFileTypes: true }).filter((e) => e.isFile())
      .map((e) => join(e.parentPath ?? (e as unknown as { path: string }).path, e.name).slice(root.length)).sort();
    const fa = files(join(dir, 'a', 'probes'));
    expect(fa).toEqual(files(join(dir, 'b', 'probes')));
    for (const f of fa) expect(Buffer.compare(readFileSync(join(dir, 'a', 'probes', f)), readFileSync(join(dir, 'b', 'probes', f)))).toBe(0);

    const meta = JSON.parse(python(`
import json, onnx
m = onnx.load(${JSON.stringify(a)})
print(json.dumps({p.key: p.value for p in m.metadata_props}))`));
    const pkg = JSON.parse(readFileSync(join(ROOT, 'package.json'), 'utf8'));
    expect(meta).toEqual({
      // the source's own entries stay
      classes: 'ok,underbaked,burnt,misplaced', scenario: 'pleat demo',
      'pleat.version': pkg.version,
      'pleat.source.sha256': createHash('sha256').update(readFileSync(SORTER)).digest('hex'),
      'pleat.check.status': 'passed',
      'pleat.check.gate': 'default per output type',
      'pleat.check.seed': '0',
    });
    // folding the folded model again replaces pleat's entries instead of piling them up
    const again = join(dir, 'again.onnx');
    expect(pleat(['fold', a, '-o', again, '--gate', 'maxAbs <= 1e-3', '--seed', '4']).code).toBe(0);
    const meta2 = JSON.parse(python(`
import json, onnx
m = onnx.load(${JSON.stringify(again)})
print(json.dumps([[p.key, p.value] for p in m.metadata_props]))`));
    expect(meta2.map((kv: string[]) => kv[0])).toEqual(Object.keys(meta));
    expect(Object.fromEntries(meta2)['pleat.check.gate']).toBe('maxAbs <= 1e-3');
    expect(Object.fromEntries(meta2)['pleat.source.sha256']).toBe(createHash('sha256').update(readFileSync(a)).digest('hex'));
  });

  it('a folder that already holds files is refused before anything is written; compare saves probes too', () => {
    const busy = join(dir, 'busy');
    mkdirSync(busy);
    writeFileSync(join(busy, 'notes.txt'), 'keep me');
    const out = join(dir, 'busy.onnx');
    const r = pleat(['fold', SORTER, '-o', out, '--save-probes', busy]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/--save-probes .*busy: the folder is not empty/);
    expect(existsSync(out)).toBe(false);
    const cdir = join(dir, 'cmp');
    const c = pleat(['compare', SORTER, SORTER, '--save-probes', cdir, '--probes', '2', '--json']);
    expect(c.code).toBe(0);
    expect(JSON.parse(c.stdout).probesSaved).toEqual({ dir: cdir, sets: 2 });
    expect(readdirSync(join(cdir, 'test_data_set_1')).sort()).toEqual(['input_0.pb', 'output_0.pb', 'output_1.pb']);
  });

  it('the probe folder is an output of the transaction: written beside, renamed in with the model, never alone', () => {
    // the model's destination collides with the probe folder's parent being read-only: refused before any work
    const ro = join(dir, 'ro');
    mkdirSync(ro);
    chmodSync(ro, 0o555);
    try {
      const r = pleat(['fold', SORTER, '-o', join(dir, 'ro-model.onnx'), '--save-probes', join(ro, 'probes')]);
      if (process.getuid?.() !== 0) { // root writes anywhere
        expect(r.code).toBe(2);
        expect(r.stderr).toMatch(/--save-probes .*cannot write in the folder/);
        expect(existsSync(join(dir, 'ro-model.onnx'))).toBe(false);
      }
    } finally { chmodSync(ro, 0o755); }
    // a failing check writes neither the model nor the probes
    const probes = join(dir, 'failing-probes'), out = join(dir, 'failing.onnx');
    const f = pleat(['fold', SORTER, '-o', out, '--save-probes', probes, '--gate', 'maxAbs < 0']);
    expect(f.code).toBe(1);
    expect(existsSync(out)).toBe(false);
    expect(existsSync(probes)).toBe(false);
    // the same folder named as the model's output and as the probe folder is refused
    const same = pleat(['fold', SORTER, '-o', join(dir, 'twice'), '--save-probes', join(dir, 'twice')]);
    expect(same.code).toBe(2);
    expect(same.stderr).toMatch(/also written as/);
    // killed after staging, before the renames: neither the model nor the probe folder appears, and the next run
    // writing there removes the temporaries (their process is gone)
    const kdir = join(dir, 'killed');
    mkdirSync(kdir);
    const k = pleat(['fold', SORTER, '-o', join(kdir, 'm.onnx'), '--save-probes', join(kdir, 'probes')], { env: { PLEAT_KILL_AT: 'staged' } });
    expect(k.code).not.toBe(0);
    expect(readdirSync(kdir).filter((n) => !n.startsWith('.pleat-'))).toEqual([]);
    expect(readdirSync(kdir).some((n) => n.endsWith('-probes.tmp'))).toBe(true);
    expect(pleat(['fold', SORTER, '-o', join(kdir, 'm.onnx'), '--save-probes', join(kdir, 'probes')]).code).toBe(0);
    expect(readdirSync(kdir).sort()).toEqual(['m.onnx', 'probes']);
    expect(readdirSync(join(kdir, 'probes')).sort()).toEqual(['float32', 'test_data_set_0', 'test_data_set_1']);
  });
});
