// Benchmarks beyond model I/O: the evaluator against onnxruntime-node on a MobileNet-like CNN, and audit
// time against graph size. Each is reported as a ratio to a yardstick measured in the same run.
import { performance } from 'node:perf_hooks';
import { execFileSync } from 'node:child_process';
import { join, dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import { tmpdir } from 'node:os';
import { writeFileSync, mkdirSync } from 'node:fs';
import { GraphBuilder, modelBytes, randn, rng, uniform, f } from '../helpers/build.js';

const here = dirname(fileURLToPath(import.meta.url));
const work = join(tmpdir(), 'pleat-bench');

/** A MobileNet-v1-like CNN at 224x224: stem conv, 13 depthwise-separable blocks, pool, dense head. */
export function mobilenetLike(seed = 3): Uint8Array {
  const r = rng(seed);
  const g = new GraphBuilder('mobilenet_like');
  g.input('image', [1, 3, 224, 224]).output('logits', [1, 1000]);
  let cur = 'image', ch = 3, k = 0;
  const convBnRelu = (cin: number, cout: number, kernel: number, stride: number, group: number) => {
    const W = g.init(`w${k}`, [cout, cin / group, kernel, kernel], randn(r, cout * (cin / group) * kernel * kernel, Math.sqrt(2 / ((cin / group) * kernel * kernel))));
    const pad = (kernel - 1) / 2;
    const c = g.node('Conv', [cur, W], { kernel_shape: [kernel, kernel], strides: [stride, stride], pads: [pad, pad, pad, pad], group });
    const bn = g.node('BatchNormalization', [c, g.init(`s${k}`, [cout], uniform(r, cout, 0.5, 1.5)), g.init(`b${k}`, [cout], randn(r, cout, 0.1)),
      g.init(`m${k}`, [cout], randn(r, cout, 0.1)), g.init(`v${k}`, [cout], uniform(r, cout, 0.5, 2))], { epsilon: f(1e-5) });
    cur = g.node('Relu', [bn]);
    k++;
  };
  convBnRelu(3, 32, 3, 2, 1); ch = 32;
  const plan: Array<[number, number]> = [[64, 1], [128, 2], [128, 1], [256, 2], [256, 1], [512, 2], [512, 1], [512, 1], [512, 1], [512, 1], [512, 1], [1024, 2], [1024, 1]];
  for (const [out, stride] of plan) {
    convBnRelu(ch, ch, 3, stride, ch);
    convBnRelu(ch, out, 1, 1, 1);
    ch = out;
  }
  const p = g.node('GlobalAveragePool', [cur]);
  const fl = g.node('Flatten', [p], { axis: 1 });
  g.node('Gemm', [fl, g.init('fc_w', [1000, ch], randn(r, 1000 * ch, 0.03)), g.init('fc_b', [1000], randn(r, 1000, 0.01))], { transB: 1 }, { outputs: ['logits'] });
  return modelBytes(g);
}

function child(job: string, ...args: string[]): { seconds: number; maxRssBytes: number; [k: string]: unknown } {
  const out = execFileSync(process.execPath, [join(here, 'child.js'), job, ...args], { encoding: 'utf8', maxBuffer: 1 << 24 });
  return JSON.parse(out.trim().split('\n').pop()!);
}

const PYTHON = '/usr/bin/python3'; // Debian's python3-onnx (plain `python3` may lack onnx)
const cli = join(here, '..', '..', 'cli', 'main.js');

/**
 * Time and peak RSS of a command as a user runs it, start to exit (interpreter start-up included). A Python
 * wrapper measures it: Node cannot read a child's peak RSS, getrusage(RUSAGE_CHILDREN) can. Best of `n` runs.
 */
function commandLine(cmd: string[], n = 3): { seconds: number; maxRssBytes: number } {
  const script = [
    'import json, resource, subprocess, sys, time',
    't0 = time.perf_counter()',
    'subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL, check=True)',
    't = time.perf_counter() - t0',
    'print(json.dumps({"seconds": t, "maxRssBytes": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss * 1024}))',
  ].join('\n');
  let best: { seconds: number; maxRssBytes: number } | undefined;
  for (let i = 0; i < n; i++) {
    const r = JSON.parse(execFileSync(PYTHON, ['-c', script, ...cmd], { encoding: 'utf8' }).trim()) as { seconds: number; maxRssBytes: number };
    if (!best || r.seconds < best.seconds) best = { seconds: r.seconds, maxRssBytes: best ? Math.min(best.maxRssBytes, r.maxRssBytes) : r.maxRssBytes };
    else best.maxRssBytes = Math.min(best.maxRssBytes, r.maxRssBytes);
  }
  return best!;
}

/**
 * `pleat survey` and `pleat audit` of generated 10^4- and 10^5-node files from the command line, against the
 * ONNX Python library's `onnx.load` of the same file in the same run (the script a user would write).
 */
function largeGraphRows(rows: string[][]): void {
  const mib = (b: number) => `${(b / 2 ** 20).toFixed(0)} MiB`;
  const at: Record<number, Record<string, { seconds: number; maxRssBytes: number }>> = {};
  for (const n of [1e4, 1e5]) {
    const file = join(work, `wide-${n}.onnx`);
    child('write-wide', String(n), file);
    const onnxLoad = commandLine([PYTHON, '-c', 'import sys, onnx; onnx.load(sys.argv[1])', file]);
    const survey = commandLine([process.execPath, cli, 'survey', file]);
    const audit = commandLine([process.execPath, cli, 'audit', file]);
    at[n] = { onnxLoad, survey, audit };
  }
  const big = at[1e5]!, small = at[1e4]!;
  const y = big.onnxLoad!;
  rows.push(['onnx.load of the 100,000-node file (Python, start to exit)', `${y.seconds.toFixed(3)} s`, 'yardstick', '', `${mib(y.maxRssBytes)} peak`, '']);
  for (const cmd of ['survey', 'audit']) {
    const r = big[cmd]!, s = small[cmd]!;
    rows.push([`pleat ${cmd} of the 100,000-node file (start to exit)`, `${r.seconds.toFixed(3)} s`,
      `${(r.seconds / y.seconds).toFixed(2)}x onnx.load; 10^4 -> 10^5 nodes: ${(r.seconds / s.seconds).toFixed(1)}x time, ${(r.maxRssBytes / s.maxRssBytes).toFixed(1)}x memory (onnx.load: ${(y.seconds / small.onnxLoad!.seconds).toFixed(1)}x, ${(y.maxRssBytes / small.onnxLoad!.maxRssBytes).toFixed(1)}x)`,
      '<= 1x; linear', `${mib(r.maxRssBytes)} peak, ${(r.maxRssBytes / y.maxRssBytes).toFixed(2)}x onnx.load`, '<= 1.5x']);
  }
}

export async function run(on: (k: string) => boolean, rows: string[][]): Promise<void> {
  if (on('large')) {
    try { largeGraphRows(rows); } catch (e) { rows.push(['survey/audit of large graphs', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }
  }
  mkdirSync(work, { recursive: true });
  if (on('eval')) {
    const path = join(work, 'mobilenet-like.onnx');
    writeFileSync(path, mobilenetLike());
    const ort = child('ort-run', path);
    for (const precision of ['float32', 'float64']) {
      try {
        const r = child('eval-run', path, precision);
        const target = precision === 'float32' ? '<= 10x' : '<= 20x';
        rows.push([`evaluate MobileNet-like 224x224 (${precision})`, `${r.seconds.toFixed(3)} s`,
          `${(r.seconds / ort.seconds).toFixed(1)}x onnxruntime-node (${ort.seconds.toFixed(3)} s, 1 thread, no graph optimization)`, target, '', '']);
      } catch (e) { rows.push([`evaluate (${precision})`, 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }
    }
  }
  if (on('audit')) {
    const sizes = [1e4, 1e5, 1e6];
    const prev: Array<{ seconds: number; walkSeconds: number }> = [];
    for (const n of sizes) {
      try {
        const r = child('audit-size', String(n)) as { seconds: number; walkSeconds: number; maxRssBytes: number };
        const before = prev[prev.length - 1];
        prev.push(r);
        rows.push([`audit ${n.toLocaleString('en')} nodes (in memory)`, `${r.seconds.toFixed(3)} s`,
          before ? `${(r.seconds / before.seconds).toFixed(1)}x the previous size (10x nodes); a bare walk: ${(r.walkSeconds / before.walkSeconds).toFixed(1)}x` : 'yardstick for the next rows',
          n === 1e5 ? '< 2 s' : 'linear', `${(r.maxRssBytes / 2 ** 20).toFixed(0)} MiB peak`, '']);
      } catch (e) { rows.push([`audit ${n} nodes`, 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }
    }
    try {
      const file = join(work, 'wide-100k.onnx');
      child('write-wide', String(1e5), file);
      const r = child('audit-file', file);
      rows.push(['pleat audit FILE, 100,000 nodes (read + check + audit)', `${r.seconds.toFixed(3)} s`, '', '', `${(r.maxRssBytes / 2 ** 20).toFixed(0)} MiB peak`, '']);
    } catch (e) { rows.push(['audit file', 'failed', String((e as Error).message).split('\n')[0]!, '', '', '']); }
  }
  void performance;
}
