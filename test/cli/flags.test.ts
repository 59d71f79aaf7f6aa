// Command-line mistakes get one line of pleat's own wording and exit 2 (issue 11 items 8, 10, 11): a
// single-value option given twice, a value outside its choices (listed from the code), unknown options with
// their dashes and a nearest suggestion, mistyped commands; -h and `pleat help` everywhere; start-up loads
// only the command being run.
import { describe, expect, it } from 'vitest';
import { spawnSync } from 'node:child_process';
import { join } from 'node:path';
import { existsSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { FORMATS } from '../../src/report/format.js';
import { CLI, ROOT, pleat } from '../helpers/cli.js';

const M = join(ROOT, 'models', 'tray-sorter.onnx');
const OUT = join(ROOT, 'never-written.onnx');

function usage(args: string[], pattern: RegExp): void {
  const r = pleat(args);
  expect(r.stderr.trim().split('\n')).toHaveLength(1);
  expect(r.stderr).toMatch(/^pleat: /);
  expect(r.stderr).toMatch(pattern);
  expect(r.code).toBe(2);
  // a refused command line writes nothing (a file of this name once reached the repository)
  expect(existsSync(OUT)).toBe(false);
  expect(existsSync(`${OUT}.data`)).toBe(false);
}

describe('single-value options given twice are exit 2 with "given twice"', () => {
  const cases: Array<[string, string[]]> = [
    ['-o', ['fold', M, '-o', 'a.onnx', '-o', 'b.onnx']],
    ['--out / -o mixed', ['fold', M, '--out', 'a.onnx', '-o', 'b.onnx']],
    ['--out-dir', ['fold', M, '--out-dir', 'a', '--out-dir', 'b']],
    ['--gate on compare', ['compare', M, M, '--gate', 'maxAbs < 1', '--gate', 'maxAbs < 2']],
    ['--gate on fold', ['fold', M, '-o', OUT, '--gate', 'maxAbs < 1', '--gate', 'maxAbs < 2']],
    ['--bundle', ['export', M, '--bundle', 'x', '--bundle', 'y']],
    ['--bundle-format', ['export', M, '--bundle', 'x', '--bundle-format', 'c', '--bundle-format', 'c']],
    ['--save', ['evaluate', M, '--save', 'x', '--save', 'y']],
    ['--probes', ['compare', M, M, '--probes', '2', '--probes', '3']],
    ['--config', ['audit', M, '--config', 'a.json', '--config', 'b.json']],
    ['--precision', ['evaluate', M, '--save', 'x', '--precision', 'float32', '--precision', 'float64']],
    ['--seed', ['fold', M, '-o', OUT, '--seed', '1', '--seed', '2']],
    ['--store', ['fold', M, '-o', OUT, '--store', 'float16', '--store', 'float16']],
    ['--format', ['audit', M, '--format', 'json', '--format=text']],
    ['--fail-on', ['audit', M, '--fail-on', 'kept', '--fail-on', 'kept']],
    ['--external-data-min', ['fold', M, '-o', OUT, '--external-data-min', '1', '--external-data-min', '2']],
  ];
  for (const [name, args] of cases) it(name, () => usage(args, /given twice/));

  it('repeatable options stay repeatable', () => {
    const r = pleat(['audit', M, '--keep', 'stem.bn', '--keep', 'res1.bn_a', '--json']);
    expect(r.code).toBe(0);
    const kept = JSON.parse(r.stdout).normalizations.filter((n: { reason?: string }) => n.reason === 'kept-by-user');
    expect(kept.map((n: { node: string }) => n.node).sort()).toEqual(['res1.bn_a', 'stem.bn']);
  });
});

describe('choices, numbers, unknown options and commands', () => {
  it('an invalid choice lists the allowed values, from the code', () => {
    usage(['audit', M, '--format', 'nosuch'], new RegExp(`--format must be one of ${FORMATS.join(', ')} \\(got 'nosuch'\\)`));
    usage(['evaluate', M, '--save', 'x', '--precision', 'float8'], /--precision must be one of float64, float32/);
    usage(['export', M, '--bundle', 'x', '--bundle-format', 'zip'], /--bundle-format must be one of safetensors, c/);
  });
  it('numbers that are not whole or are out of range', () => {
    usage(['fold', M, '-o', OUT, '--external-data-min', 'abc'], /--external-data-min abc: give a whole number of bytes/);
    usage(['fold', M, '-o', OUT, '--external-data-min', '-5'], /--external-data-min -5: give a whole number of bytes, 0 or more/);
    usage(['compare', M, M, '--probes', '0'], /--probes 0: give a whole number of probe sets, from 1 to 10000/);
    // past their bounds: a probe count was an internal error (an array of 1e300), a seed was taken modulo 2^32
    // while the report recorded the seed given (seed 4294967303 drew the probes of seed 7)
    usage(['fold', M, '-o', OUT, '--probes', '1e300'], /^pleat: --probes 1e300: give a whole number of probe sets, from 1 to 10000/);
    usage(['compare', M, M, '--probes', '10001'], /--probes 10001: give a whole number of probe sets, from 1 to 10000/);
    usage(['compare', M, M, '--seed', '4294967303'], /^pleat: --seed 4294967303: give a whole number from 0 to 4294967295 \(the probe generator takes 32 bits\)/);
    usage(['compare', M, M, '--seed', '-1'], /--seed -1: give a whole number from 0 to 4294967295/);
    usage(['evaluate', M, '--save', OUT, '--seed', '1e300'], /--seed 1e300: give a whole number from 0 to 4294967295/);
    usage(['compare', M, M, '--threads', '0'], /--threads 0: give a whole number of threads, 1 or more/);
    usage(['compare', M, M, '--threads', '-1'], /--threads -1: give a whole number of threads, 1 or more/);
    // a negative number in exponent notation is the option's value, not short flags (it was "unexpected arguments 2, e")
    usage(['compare', M, M, '--seed', '-2e3'], /^pleat: --seed -2e3: give a whole number from 0 to 4294967295/);
    usage(['fold', M, '-o', OUT, '--quant-threshold', '-1e2', '--keep', 'nosuch.bn'], /--keep nosuch\.bn/);
    usage(['compare', M, M, '--probes', '1.5'], /--probes 1.5/);
    usage(['fold', M, '-o', OUT, '--quant-threshold', 'abc'], /--quant-threshold abc: give a number of decibels/);
    // a real number is fine for decibels: the run gets past the flags (to the name check, here)
    usage(['fold', M, '-o', OUT, '--quant-threshold', '12.5', '--keep', 'nosuch.bn'], /--keep nosuch\.bn/);
  });
  it('a count, seed, size or byte count is taken only in plain decimal digits (0x10, 1e3, \' 3\' ran as 16, 1000, 3)', () => {
    const loose = ['0x10', '1e3', ' 3', '3 ', '3.0', '+3', '0b11', '0o7', '010', '-0', '1_000'];
    const flags: Array<[string, string[]]> = [
      ['--seed', ['compare', M, M]],
      ['--probes', ['fold', M, '-o', OUT]],
      ['--threads', ['compare', M, M]],
      ['--external-data-min', ['fold', M, '-o', OUT]],
    ];
    for (const [flag, head] of flags) {
      for (const v of loose) {
        const shown = /\s/.test(v) ? `'${v}'` : v;
        const esc = shown.replace(/[.+]/g, '\\$&');
        usage([...head, flag, v], new RegExp(`^pleat: ${flag} ${esc}: give a whole number.*, written in plain decimal digits\n$`));
        if (v === '0x10' || v === ' 3') usage([...head, `${flag}=${v}`], new RegExp(`^pleat: ${flag} ${esc}: give a whole number`));
      }
      // past the flag check with the same number written plainly (the run goes on to the --dim name check)
      expect(pleat([...head, flag, '3', '--dim', 'nosuch=1']).stderr).toMatch(/^pleat: --dim '?nosuch'?[: ].*(no input|matches no)/);
    }
    usage(['compare', M, M, '--seed', '99999999999999999999'], /--seed 99999999999999999999: give a whole number from 0/);
    usage(['fold', M, '-o', OUT, '--external-data-min', '99999999999999999999'], /--external-data-min 99999999999999999999: give a whole number of bytes/);
    // sizes inside --dim and --shape, and a byte count with its unit
    usage(['compare', M, M, '--dim', 'batch= 2'], /^pleat: --dim 'batch= 2': ' 2' is not a non-negative whole number in plain decimal digits/);
    usage(['compare', M, M, '--dim', 'batch=02'], /--dim 'batch=02': '02' is not/);
    usage(['compare', M, M, '--shape', 'x=1, 3'], /--shape 'x=1, 3': ' 3' is not/);
    usage(['compare', M, M, '--max-probe-memory', ' 64M'], /^pleat: --max-probe-memory ' 64M': give a number of bytes/);
    usage(['compare', M, M, '--max-probe-memory', '064M'], /--max-probe-memory '064M'/);
  });
  it('a real-valued flag keeps decimal and exponent notation, and refuses the other notations', () => {
    for (const v of ['1e1', '-2.5e0', '.5', '12.', '+20', '1E-5']) {
      expect(pleat(['fold', M, '-o', OUT, '--quant-threshold', v, '--keep', 'nosuch.bn']).stderr, v).toMatch(/--keep nosuch\.bn/);
    }
    for (const v of ['0x14', ' 20', '20 ', '0b1', 'Infinity', '1e', '.']) {
      const shown = /\s/.test(v) ? `'${v}'` : v;
      usage(['fold', M, '-o', OUT, '--quant-threshold', v], new RegExp(`^pleat: --quant-threshold ${shown.replace(/[.+]/g, '\\$&')}: give a number of decibels`));
    }
  });
  it('survey takes --format text|json, as the README lists it (it was an unknown option)', () => {
    const j = pleat(['survey', M, '--format', 'json']);
    expect(j.code).toBe(0);
    expect(j.stdout).toBe(pleat(['survey', M, '--json']).stdout);
    expect(pleat(['survey', M, '--format', 'text']).stdout).toBe(pleat(['survey', M]).stdout);
    usage(['survey', M, '--format', 'xml'], /--format must be one of text, json \(got 'xml'\)/);
    usage(['survey', M, '--json', '--format', 'text'], /--json and --format text disagree/);
  });
  it('after --, a word that starts with a dash is a file (it was left unassigned: "missing argument")', () => {
    const d = mkdtempSync(join(tmpdir(), 'pleat-dashdash-'));
    writeFileSync(join(d, '-old.onnx'), readFileSync(M));
    const r = pleat(['survey', '--json', '--', '-old.onnx'], { cwd: d });
    expect(r.stderr).toBe('');
    expect(r.code).toBe(0);
    expect(JSON.parse(r.stdout).nodeCount).toBe(JSON.parse(pleat(['survey', M, '--json']).stdout).nodeCount);
    const a = pleat(['audit', '--quiet', '--json', '--', '-old.onnx'], { cwd: d });
    expect(a.code, a.stderr).toBe(0);
  });
  it('an option without its value', () => usage(['fold', M, '-o'], /-o needs a value/));
  it('unknown options print with their dashes and the nearest known option', () => {
    usage(['audit', M, '--formt', 'json'], /unknown option --formt \(did you mean --format\?\)/);
    usage(['fold', M, '-o', OUT, '--extrnal-data-min', '5'], /unknown option --extrnal-data-min \(did you mean --external-data-min\?\)/);
    usage(['audit', M, '-x'], /unknown option -x;/);
    usage(['--verbose'], /unknown option --verbose before a command/);
  });
  it('a mistyped command suggests the nearest command', () => {
    usage(['fodl', M], /'fodl' is not a pleat command \(did you mean 'fold'\?\)/);
    usage(['exprot', M], /did you mean 'export'\?/);
    usage(['zzzzzz'], /'zzzzzz' is not a pleat command; commands: survey, fold/);
  });
  it('missing arguments name the command usage, missing options name the flag', () => {
    usage(['survey'], /missing argument; usage: pleat survey <model>/);
    usage(['evaluate', M], /missing required option --save/);
  });
});

describe('help everywhere', () => {
  for (const args of [['-h'], ['--help'], ['help']]) {
    it(`pleat ${args.join(' ')} lists the commands`, () => {
      const r = pleat(args);
      expect(r.code).toBe(0);
      for (const c of ['survey', 'fold', 'audit', 'compare', 'evaluate', 'export']) expect(r.stdout).toContain(`pleat ${c} `);
      expect(r.stdout).toContain('pleat help <command>');
    });
  }
  for (const args of [['fold', '-h'], ['fold', '--help'], ['help', 'fold']]) {
    it(`pleat ${args.join(' ')} shows fold's options`, () => {
      const r = pleat(args);
      expect(r.code).toBe(0);
      expect(r.stdout).toMatch(/^pleat fold <models\.\.>/);
      expect(r.stdout).toContain('--external-data-min');
    });
  }
  it('pleat help with an unknown command is a usage error', () => usage(['help', 'flod'], /did you mean 'fold'/));
});

/** The modules under dist/ that node loads for a command line (NODE_DEBUG=esm names each one). */
function loaded(args: string[]): string[] {
  const r = spawnSync(process.execPath, [CLI, ...args], { encoding: 'utf8', env: { ...process.env, NODE_DEBUG: 'esm' } });
  const urls = new Set<string>();
  for (const m of r.stderr.matchAll(/Storing file:\/\/\S*?\/dist\/(\S+\.js)/g)) urls.add(m[1]!);
  return [...urls];
}

describe('start-up loads only what the command line needs', () => {
  it('--help loads no command module and none of the library beyond errors and the exit-code text', () => {
    const mods = loaded(['--help']);
    expect(mods).toContain('cli/main.js');
    expect(mods.filter((m) => m.startsWith('cli/commands/') && m !== 'cli/commands/table.js')).toEqual([]);
    expect(mods.filter((m) => m.startsWith('src/')).sort()).toEqual(['src/errors.js', 'src/report/exit-codes.js', 'src/report/format.js', 'src/verify/option-values.js', 'src/verify/probe-bounds.js'].filter((m) => mods.includes(m)));
    expect(mods.some((m) => m.startsWith('src/jobs/') || m.startsWith('src/eval/') || m.startsWith('src/fold/'))).toBe(false);
  });
  it('fold -h loads the fold command and no other command module', () => {
    const cmds = loaded(['fold', '-h']).filter((m) => m.startsWith('cli/commands/'));
    expect(cmds.sort()).toEqual(['cli/commands/fold.js', 'cli/commands/table.js']);
  });
});

describe('names that match nothing are errors (item 9)', () => {
  const E = join(ROOT, 'models', 'tray-edge.onnx');
  it('--keep of a node that does not exist names the value', () => {
    usage(['fold', M, '-o', OUT, '--keep', 'nosuch.bn'], /--keep nosuch\.bn: no normalization of that name in .*tray-sorter\.onnx/);
    usage(['audit', M, '--keep', 'nosuch.bn'], /--keep nosuch\.bn: no normalization/);
    usage(['export', M, '--bundle', join(ROOT, 'never-written'), '--keep', 'nosuch.bn'], /--keep nosuch\.bn: no normalization/);
  });
  it('--keep of a node that is no normalization says what it is', () => {
    usage(['fold', M, '-o', OUT, '--keep', 'stem.conv'], /--keep stem\.conv: node 'stem\.conv' in .* is a Conv, not a normalization/);
  });
  it('--dim and --shape of names the model lacks', () => {
    usage(['fold', M, '-o', OUT, '--dim', 'nosuch=1'], /--dim nosuch: no input of .*tray-sorter\.onnx has a dynamic dim named 'nosuch' \(dims: batch\)/);
    usage(['fold', M, '-o', OUT, '--shape', 'nosuch=1x2'], /--shape nosuch: .* has no input named 'nosuch' \(inputs: image\)/);
  });
  it('a batch: a name must match in at least one of its models', () => {
    expect(pleat(['audit', M, E, '--keep', 'stem.bn']).code).toBe(0);
    usage(['audit', M, E, '--keep', 'nosuch.bn'], /--keep nosuch\.bn: no normalization of that name in any of the 2 models/);
    usage(['fold', M, E, '--out-dir', join(ROOT, 'never-written'), '--dim', 'nosuch=1'], /--dim nosuch: no input of any of the 2 models/);
  });
  it('compare and evaluate name a dim or shape from the config file as coming from it, not as a flag never typed', async () => {
    const { mkdtempSync, writeFileSync, existsSync } = await import('node:fs');
    const { tmpdir } = await import('node:os');
    const d = mkdtempSync(join(tmpdir(), 'pleat-names-'));
    writeFileSync(join(d, 'dims.json'), JSON.stringify({ dims: { nosuch: 2 } }));
    writeFileSync(join(d, 'shapes.json'), JSON.stringify({ shapes: { nosuch: [1, 2] } }));
    const cases: Array<[string[], RegExp]> = [
      [['compare', M, M, '--config', join(d, 'dims.json')], /^pleat: 'nosuch' under "dims" in .*dims\.json: no input of any of the 2 models has a dynamic dim named 'nosuch'/],
      [['compare', M, M, '--config', join(d, 'shapes.json')], /^pleat: 'nosuch' under "shapes" in .*shapes\.json: none of the 2 models has an input named 'nosuch' \(inputs: image\)/],
      [['evaluate', M, '--save', join(d, 'out'), '--config', join(d, 'dims.json')], /^pleat: 'nosuch' under "dims" in .*dims\.json: no input of .* has a dynamic dim named 'nosuch'/],
      [['evaluate', M, '--save', join(d, 'out'), '--config', join(d, 'shapes.json')], /^pleat: 'nosuch' under "shapes" in .*shapes\.json: .* has no input named 'nosuch'/],
    ];
    for (const [args, message] of cases) {
      const r = pleat(args, { cwd: d });
      expect(r.code, args.join(' ')).toBe(2);
      expect(r.stderr).toMatch(message);
      expect(r.stderr).not.toMatch(/--dim|--shape/);
    }
    expect(existsSync(join(d, 'out'))).toBe(false);
    // given as flags, they are named as the flags
    usage(['compare', M, M, '--dim', 'nosuch=2'], /^pleat: --dim nosuch: no input of any of the 2 models/);
    usage(['evaluate', M, '--save', join(d, 'out'), '--shape', 'nosuch=1x2'], /^pleat: --shape nosuch: .* has no input named 'nosuch'/);
  });

  it('a keep from the config file is reported as coming from the config file', async () => {
    const { mkdtempSync, writeFileSync } = await import('node:fs');
    const { tmpdir } = await import('node:os');
    const d = mkdtempSync(join(tmpdir(), 'pleat-names-'));
    writeFileSync(join(d, 'pleat.config.json'), JSON.stringify({ keep: ['nosuch.bn'] }));
    const r = pleat(['audit', M], { cwd: d });
    expect(r.code).toBe(2);
    expect(r.stderr).toMatch(/'nosuch\.bn' under "keep" in pleat\.config\.json: no normalization/);
    expect(r.stderr).not.toMatch(/--keep/);
    writeFileSync(join(d, 'team.json'), JSON.stringify({ keep: ['stem.bn'] }));
    const ok = pleat(['audit', M, '--config', join(d, 'team.json'), '--json'], { cwd: d });
    expect(ok.code).toBe(0);
    const stem = JSON.parse(ok.stdout).normalizations.find((n: { node: string }) => n.node === 'stem.bn');
    expect(stem.hint).toMatch(/listed under "keep" in .*team\.json/);
    expect(stem.hint).not.toMatch(/--keep/);
  });
});

describe('--version', () => {
  it("prints the version in package.json, alone on a line", () => {
    const pkg = JSON.parse(readFileSync(join(ROOT, 'package.json'), 'utf8')) as { version: string };
    const r = pleat(['--version']);
    expect(r.code).toBe(0);
    expect(r.stdout).toBe(`${pkg.version}\n`);
  });
});
