// The library entry point (src/index.ts) against the command line: the same JSON shapes and bytes as --json
// (judged by ajv, a general-purpose JSON Schema validator, against the shipped schema, and by the CLI's own
// output), the same refusals of option values (the CLI's flag check, cli/check-flags.ts, is the reference), and
// no state carried from one call to the next.
import { afterAll, describe, expect, it } from 'vitest';
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { audit, compare, evaluate, exportFile, fold, PleatError, toJsonText } from '../src/index.js';
import { NUMBER_OPTIONS, type NumberRule } from '../src/verify/option-values.js';
import { checkFlags, type OptionTable } from '../cli/check-flags.js';
import { setThreads, threadCount } from '../src/eval/threads.js';
import { GraphBuilder, modelBytes, rng } from './helpers/build.js';
import { pleat, ROOT } from './helpers/cli.js';
import { schemaValidator } from './report/helpers.js';

const work = mkdtempSync(join(tmpdir(), 'pleat-library-'));
afterAll(() => rmSync(work, { recursive: true, force: true }));
const PUMP = 'models/pump-vibration.onnx';
const SORTER = 'models/tray-sorter.onnx';
const at = (p: string) => join(ROOT, p);

/** Conv weights that are whole numbers up to 127 (one 8-bit scale of exactly 1 rounds nothing: SQNR is infinite), then a BatchNormalization. */
function exactWeightsModel(): string {
  const r = rng(4);
  const g = new GraphBuilder('exact_weights');
  g.input('x', [1, 3, 4, 4]);
  const w = Array.from({ length: 4 * 3 }, () => Math.round((r() - 0.5) * 200));
  w[0] = 127;
  g.init('W', [4, 3, 1, 1], w);
  const c = g.node('Conv', ['x', 'W'], {}, { name: 'conv' });
  for (const [n, v] of [['s', [1.5, 0.5, 2, 1]], ['b', [0.1, 0.2, 0.3, 0.4]], ['m', [0, 0, 0, 0]], ['v', [1, 1, 1, 1]]] as const) g.init(n, [4], v);
  g.node('BatchNormalization', [c, 's', 'b', 'm', 'v'], {}, { name: 'bn', outputs: ['y'] });
  g.output('y', [1, 4, 4, 4]);
  const path = join(work, 'exact.onnx');
  writeFileSync(path, modelBytes(g));
  return path;
}

describe('library results are the --json shapes', { timeout: 180_000 }, () => {
  const validate = schemaValidator();

  it('compare(): schemaVersion, command, a and b; the JSON text equals `pleat compare --json` byte for byte', () => {
    const folded = join(work, 'pv.onnx');
    fold(at(PUMP), folded);
    const r = compare(at(PUMP), folded, { probes: 2 });
    expect(r).toMatchObject({ command: 'compare', a: at(PUMP), b: folded });
    const text = toJsonText(r);
    expect(validate(JSON.parse(text)), JSON.stringify(validate.errors)).toBe(true);
    const cli = pleat(['compare', at(PUMP), folded, '--probes', '2', '--json']);
    expect(cli.code, cli.stderr).toBe(0);
    expect(text).toBe(cli.stdout);
  });

  it('exportFile(): schemaVersion, command and model; the JSON text equals `pleat export --json` byte for byte', () => {
    const dir = join(work, 'bundle');
    const cli = pleat(['export', at(SORTER), '--bundle', dir, '--bundle-format', 'c', '--json']);
    expect(cli.code, cli.stderr).toBe(0);
    const r = exportFile(at(SORTER), dir, 'c');
    expect(r).toMatchObject({ command: 'export', model: at(SORTER) });
    const text = toJsonText(r);
    expect(validate(JSON.parse(text)), JSON.stringify(validate.errors)).toBe(true);
    expect(text).toBe(cli.stdout);
  });

  it('non-finite figures: toJsonText writes "Infinity" as the schema wants (JSON.stringify writes null, which fails it)', () => {
    const model = exactWeightsModel();
    const r = fold(model, join(work, 'exact.folded.onnx'));
    expect(r.quantization[0]!.sqnrBefore.tensor).toBe(Infinity);
    const text = toJsonText(r);
    expect(JSON.parse(text).quantization[0].sqnrBefore.tensor).toBe('Infinity');
    expect(validate(JSON.parse(text)), JSON.stringify(validate.errors)).toBe(true);
    expect(validate(JSON.parse(JSON.stringify(r)))).toBe(false);
    const cli = pleat(['fold', model, '-o', join(work, 'exact.folded.onnx'), '--json']);
    expect(text).toBe(cli.stdout);
  });
});

describe('the library refuses the option values the command line refuses', { timeout: 120_000 }, () => {
  const out = join(work, 'never.onnx');
  const cases: Array<[string, () => unknown, RegExp]> = [
    ['fold store', () => fold(at(PUMP), out, { store: 'fp16' as never }), /^option store 'fp16': give one of float16$/],
    ['fold simulateInt8', () => fold(at(PUMP), out, { simulateInt8: 'bogus' as never }), /^option simulateInt8 'bogus': give one of tensor, channel$/],
    ['fold quantThresholdDb NaN', () => fold(at(PUMP), out, { quantThresholdDb: NaN }), /^option quantThresholdDb NaN: give a number of decibels/],
    ['fold threads 0', () => fold(at(PUMP), out, { threads: 0 }), /^option threads 0: give a whole number of threads, 1 or more$/],
    ['fold threads -1', () => fold(at(PUMP), out, { threads: -1 }), /^option threads -1: /],
    ['fold threads 1.5', () => fold(at(PUMP), out, { threads: 1.5 }), /^option threads 1.5: /],
    ['fold externalThreshold -1', () => fold(at(PUMP), out, { externalThreshold: -1 }), /^option externalThreshold -1: give a whole number of bytes/],
    ['fold dims batch -2', () => fold(at(SORTER), out, { dims: { batch: -2 } }), /^option dims.batch -2: give a whole number, 0 or more$/],
    ['fold dims batch 1.5', () => fold(at(SORTER), out, { dims: new Map([['batch', 1.5]]) }), /^option dims.batch 1.5: /],
    ['fold shapes', () => fold(at(PUMP), out, { shapes: { vibration: [1, -2, 256] } }), /^option shapes.vibration \[1,-2,256\]: /],
    ['fold keep as a string', () => fold(at(PUMP), out, { keep: 'c1.bn' as never }), /^option keep 'c1.bn': give an array of node names$/],
    ['fold probes 0', () => fold(at(PUMP), out, { probes: 0 }), /^option probes 0: give a whole number of probe sets, from 1 to 10000$/],
    ['fold seed 2^32', () => fold(at(PUMP), out, { seed: 2 ** 32 }), /^option seed 4294967296: /],
    ['audit failOn', () => audit(at(PUMP), { failOn: 'bogus' as never }), /^option failOn 'bogus': give one of kept$/],
    ['evaluate precision', () => evaluate(at(PUMP), { precision: 'float16' as never }), /^option precision 'float16': give one of float64, float32$/],
    ['evaluate seed -1', () => evaluate(at(PUMP), { seed: -1 }), /^option seed -1: give a whole number from 0 to 4294967295/],
    ['evaluate seed 1.5', () => evaluate(at(PUMP), { seed: 1.5 }), /^option seed 1.5: /],
    ['compare maxProbeMemory 0', () => compare(at(PUMP), at(PUMP), { maxProbeMemory: 0 }), /^option maxProbeMemory 0: /],
    ['compare simulateInt8', () => compare(at(PUMP), at(PUMP), { simulateInt8: 'weights' as never }), /^option simulateInt8 'weights': /],
    ['exportFile store', () => exportFile(at(PUMP), join(work, 'never-bundle'), 'c', { store: 'float32' as never }), /^option store 'float32': /],
  ];
  for (const [what, run, message] of cases) {
    it(`${what}: bad-input naming the option and the value, before any work`, () => {
      let caught: unknown;
      try { run(); } catch (e) { caught = e; }
      expect(caught).toBeInstanceOf(PleatError);
      expect((caught as PleatError).kind).toBe('bad-input');
      expect((caught as Error).message).toMatch(message);
    });
  }

  it('number options: the library refuses exactly the values the command line refuses (seeded values)', () => {
    const rules = Object.entries(NUMBER_OPTIONS as Record<string, NumberRule>).filter(([, r]) => r.flag !== undefined);
    const table: OptionTable = {
      key: Object.fromEntries(rules.map(([, r]) => [r.flag!, true])), alias: {}, boolean: [], number: rules.map(([, r]) => r.flag!), choices: {},
    };
    const r = rng(17);
    const special = [0, 1, -1, 0.5, 1.5, -0.25, NaN, Infinity, -Infinity, 2 ** 32 - 1, 2 ** 32, 10_000, 10_001, 1e300, -1e300, 20, 35.5];
    const values = [...special, ...Array.from({ length: 200 }, () => (r() < 0.5 ? Math.round((r() - 0.3) * 2 ** (1 + Math.floor(r() * 34))) : (r() - 0.5) * 10 ** Math.floor(r() * 12)))];
    let refusedBoth = 0;
    for (const [name, rule] of rules) {
      for (const v of values) {
        let cli = false, lib = false;
        try { checkFlags([`--${rule.flag}=${v}`], table); } catch { cli = true; }
        try { fold(at(PUMP), out, { [name]: v, keep: ['no-such-node'] }); } catch (e) { lib = (e as PleatError).kind === 'bad-input'; }
        expect(lib, `${name} ${v}`).toBe(cli);
        if (cli) refusedBoth++;
      }
    }
    expect(refusedBoth).toBeGreaterThan(100); // both sides of every bound were tried
  });
});

describe('no state carries from one library call to the next', { timeout: 120_000 }, () => {
  it("a call's threads apply to that call only", () => {
    const before = threadCount();
    setThreads(3);
    try {
      fold(at(PUMP), join(work, 't1.onnx'), { threads: 1, probes: 1 });
      expect(threadCount()).toBe(3);
      exportFile(at(PUMP), join(work, 't-bundle'), 'safetensors', { threads: 2, probes: 1 });
      expect(threadCount()).toBe(3);
      // also when the call fails
      expect(() => fold(at(PUMP), join(work, 't2.onnx'), { threads: 1, keep: ['no-such-node'] })).toThrow(PleatError);
      expect(threadCount()).toBe(3);
    } finally {
      setThreads(before);
    }
  });
});

