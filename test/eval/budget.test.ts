// Bounded work (issue 11 items 6 and 7): sizes are range-checked and the probe's memory is estimated from the
// shapes before anything is evaluated; every value made during evaluation is checked against the probe memory
// limit before it is allocated; malformed layers are bad-model refusals. Each case was exit 3, a hang or
// gigabytes of memory before.
import { describe, expect, it } from 'vitest';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { GraphBuilder, modelBytes, T } from '../helpers/build.js';
import { pleat } from '../helpers/cli.js';
import { parseModel, readModelFile } from '../../src/onnx/read.js';
import { writeModelFile } from '../../src/onnx/write.js';
import { runModel } from '../../src/eval/run.js';
import { DEFAULT_PROBE_MEMORY, withProbeMemory } from '../../src/eval/budget.js';
import { PleatError } from '../../src/errors.js';

const tmp = () => mkdtempSync(join(tmpdir(), 'pleat-budget-'));

function save(g: GraphBuilder, opset = 13): string {
  const p = join(tmp(), 'm.onnx');
  writeFileSync(p, modelBytes(g, { opset }));
  return p;
}

/** Small models whose one node makes 10^12 elements (or more) from a few bytes of constants. */
const growers: Array<[string, () => GraphBuilder]> = [
  ['ConstantOfShape', () => {
    const g = new GraphBuilder();
    g.input('x', [1]).output('y');
    g.init('shape', [2], [1e6, 1e6], T.INT64);
    g.node('ConstantOfShape', ['shape'], {}, { outputs: ['c'] });
    g.node('Add', ['c', 'x'], {}, { outputs: ['y'] });
    return g;
  }],
  ['Expand', () => {
    const g = new GraphBuilder();
    g.input('x', [1]).output('y');
    g.init('shape', [2], [1e6, 1e6], T.INT64);
    g.node('Expand', ['x', 'shape'], {}, { outputs: ['y'] });
    return g;
  }],
  ['Tile', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 1]).output('y');
    g.init('reps', [2], [1e6, 1e6], T.INT64);
    g.node('Tile', ['x', 'reps'], {}, { outputs: ['y'] });
    return g;
  }],
  ['Resize', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 1, 2, 2]).output('y');
    g.init('scales', [4], [1, 1, 1e6, 1e6]);
    g.node('Resize', ['x', '', 'scales'], { mode: 'nearest' }, { outputs: ['y'] });
    return g;
  }],
  ['Range', () => {
    const g = new GraphBuilder();
    g.input('x', [1]).output('y');
    g.init('start', [], [0]);
    g.init('limit', [], [1e12]);
    g.init('delta', [], [1]);
    g.node('Range', ['start', 'limit', 'delta'], {}, { outputs: ['r'] });
    g.node('Add', ['r', 'x'], {}, { outputs: ['y'] });
    return g;
  }],
  ['Pad', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y');
    g.init('pads', [4], [0, 0, 0, 1e12], T.INT64);
    g.node('Pad', ['x', 'pads'], {}, { outputs: ['y'] });
    return g;
  }],
];

describe('values made during evaluation are checked before they are allocated', () => {
  for (const [op, build] of growers) {
    it(`${op} making 10^12 elements is refused, naming the node and the limit`, () => {
      const m = parseModel(modelBytes(build(), { opset: 13 }), tmp(), 'm.onnx');
      const inputs = new Map(m.graph.inputs.map((i) => [i.name, { type: T.FLOAT, dims: i.shape as number[], data: new Float64Array((i.shape as number[]).reduce((a, b) => a * b, 1)) }]));
      let err: unknown;
      try { runModel(m, inputs, { precision: 'float64' }); } catch (e) { err = e; }
      expect(err).toBeInstanceOf(PleatError);
      expect((err as Error).message).toMatch(new RegExp(`\\(${op}\\).*(probe memory limit of 1\\.0 GiB|cannot exist)`));
    });
  }

  it('the limit can be raised or lowered (--max-probe-memory), and it bounds values alive at once', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y');
    g.init('pads', [4], [0, 0, 0, 100000], T.INT64); // 100004 floats: 800 KB in float64
    g.node('Pad', ['x', 'pads'], {}, { outputs: ['y'] });
    const m = parseModel(modelBytes(g, { opset: 13 }), tmp(), 'm.onnx');
    const inputs = new Map([['x', { type: T.FLOAT, dims: [1, 4], data: new Float64Array(4) }]]);
    expect(() => withProbeMemory(512 * 1024, () => runModel(m, inputs, { precision: 'float64' }))).toThrow(/probe memory limit of 524288 bytes/);
    expect(withProbeMemory(2 * 1024 * 1024, () => runModel(m, inputs, { precision: 'float64' })).get('y')!.dims).toEqual([1, 100004]);
    expect(DEFAULT_PROBE_MEMORY).toBeGreaterThanOrEqual(256 * 1024 * 1024);
    expect(DEFAULT_PROBE_MEMORY).toBeLessThanOrEqual(1024 * 1024 * 1024);
  });
});

describe('probe sizes checked from the shapes before evaluating (CLI)', () => {
  it('a graph input dim of -7 is refused by name', () => {
    const g = new GraphBuilder();
    g.input('x', [1, -7]).output('y');
    g.node('Relu', ['x'], {}, { outputs: ['y'] });
    const p = save(g);
    const r = pleat(['fold', p, '-o', p.replace('m.onnx', 'o.onnx')]);
    expect(r.code).toBe(2);
    expect(r.stderr.trim().split('\n')).toHaveLength(1);
    expect(r.stderr).toMatch(/input 'x' dim 1 is -7/);
  });

  it('a graph input dim of 2^40 and --dim batch=300000 are refused naming the size and the limit', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 2 ** 40]).output('y');
    g.node('Relu', ['x'], {}, { outputs: ['y'] });
    const p = save(g);
    let r = pleat(['fold', p, '-o', p.replace('m.onnx', 'o.onnx')]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/\[1,1099511627776\] need 8192\.0 GiB in float64, above the probe memory limit of/);
    r = pleat(['fold', 'models/tray-sorter.onnx', '-o', join(tmp(), 'o.onnx'), '--dim', 'batch=300000']);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/'image' \[300000,3,64,64\] need 27\.5 GiB in float64, above the probe memory limit of .*--max-probe-memory/);
  });

  it('Conv pads of 2^62 and ConvTranspose strides of 2^40 are refused (exit 2, not 3)', () => {
    for (const [op, attrs] of [['Conv', { pads: [2 ** 62, 2 ** 62, 2 ** 62, 2 ** 62] }], ['ConvTranspose', { strides: [2 ** 40, 2 ** 40] }]] as const) {
      const g = new GraphBuilder();
      g.input('x', [1, 1, 4, 4]).output('y');
      g.init('w', [1, 1, 3, 3], new Array(9).fill(0.1));
      g.node(op, ['x', 'w'], attrs, { outputs: ['y'] });
      const p = save(g);
      const r = pleat(['fold', p, '-o', p.replace('m.onnx', 'o.onnx')]);
      expect(r.code, `${op}: ${r.stderr}`).toBe(2);
      expect(r.stderr.trim().split('\n')).toHaveLength(1);
    }
  });

  it('a one-number edit of a demo model (input dim 64 -> 65536) is refused before any evaluation', () => {
    const dir = tmp();
    const m = readModelFile('models/tray-edge.onnx');
    m.graph.inputs[0]!.shape![3] = 65536;
    writeModelFile(m, join(dir, 'wide.onnx'));
    const r = pleat(['fold', join(dir, 'wide.onnx'), '-o', join(dir, 'o.onnx')]);
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/a probe of this model would make values of 2\.0 GiB in float64 .*\[1,8,64,65536\].*above the probe memory limit of/);
    // and with a limit set by the user
    const small = pleat(['fold', 'models/tray-edge.onnx', '-o', join(dir, 'o.onnx'), '--max-probe-memory', '1M']);
    expect(small.code).toBe(2);
    expect(small.stderr).toMatch(/above the probe memory limit of 1\.0 MiB/);
    expect(pleat(['fold', 'models/tray-edge.onnx', '-o', join(dir, 'o.onnx'), '--max-probe-memory', '64M']).code).toBe(0);
    expect(pleat(['fold', 'models/tray-edge.onnx', '-o', join(dir, 'o.onnx'), '--max-probe-memory', 'lots']).code).toBe(2);
  });
});

describe('malformed layers are bad-model refusals (issue 11 item 7)', () => {
  it('a Gemm bias that does not broadcast to the output columns', () => {
    const g = new GraphBuilder();
    g.input('x', [1, 4]).output('y', [1, 3]);
    g.init('w', [3, 4], new Array(12).fill(0.5));
    g.init('c', [2], [1, 2]);
    g.init('s', [3], [1, 2, 3]);
    g.init('b', [3], [0, 0, 0]);
    g.init('mean', [3], [0, 0, 0]);
    g.init('var', [3], [1, 1, 1]);
    g.node('Gemm', ['x', 'w', 'c'], { transB: 1 }, { name: 'fc', outputs: ['h'] });
    g.node('BatchNormalization', ['h', 's', 'b', 'mean', 'var'], {}, { name: 'bn', outputs: ['y'] });
    const p = save(g);
    for (const cmd of [['fold', p, '-o', p.replace('m.onnx', 'o.onnx')], ['audit', p]]) {
      const r = pleat(cmd);
      expect(r.code, r.stderr).toBe(2);
      expect(r.stderr).toMatch(/Gemm bias 'c' of dims \[2\] does not broadcast/);
    }
    expect(readFileSync(p).byteLength).toBeGreaterThan(0);
  });
});
