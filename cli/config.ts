// Defaults from a config file (pleat.config.json in the working directory, or --config FILE), merged with
// flags. Flags override the file: a --dim or --shape replaces the file's entry for that name, --gate, --probes,
// --seed, --store and --fail-on replace the file's value, and --keep adds to the file's keep list (a node the
// team chose to keep stays kept). Unknown keys are an error naming the key, so a typo never passes silently.
import { lstatSync, readFileSync, statSync } from 'node:fs';
import { join } from 'node:path';
import { PleatError } from '../src/errors.js';
import { withProbeMemory } from '../src/eval/budget.js';
import { checkProbeCount, checkSeed, loadInputFiles, parseInputFlags, type InputValue } from '../src/verify/inputs.js';
import { MAX_PROBES, MAX_SEED } from '../src/verify/probe-bounds.js';
import { PLAIN_WHOLE } from '../src/verify/option-values.js';
import type { NameOrigins } from '../src/jobs/names.js';

export const CONFIG_FILE = 'pleat.config.json';

export interface PleatConfig {
  /** Sizes of symbolic dims, e.g. { "batch": 1 }. */
  dims?: Record<string, number>;
  /** Input shapes, e.g. { "image": "1x3x224x224" } or { "image": [1, 3, 224, 224] }. */
  shapes?: Record<string, string | number[]>;
  /** Gate expression for whole-model checks and compare. */
  gate?: string;
  /** Nodes to leave in place. */
  keep?: string[];
  failOn?: 'kept';
  probes?: number;
  seed?: number;
  store?: 'float16';
  /** A skipped check fails (as --strict). */
  strict?: boolean;
}

type Check = (v: unknown) => boolean;
const isInt = (v: unknown) => typeof v === 'number' && Number.isSafeInteger(v) && v >= 0;
/** A shape as text: sizes in plain decimal digits joined by x or a comma ("1x 3" or "1x0x2" is refused, as --shape refuses it). */
const isShapeText = (v: string) => v.split(/[x,]/).every((d) => PLAIN_WHOLE.test(d)) || v === '';
const isRecord = (v: unknown): v is Record<string, unknown> => typeof v === 'object' && v !== null && !Array.isArray(v);

const KEYS: Record<keyof PleatConfig, { check: Check; want: string }> = {
  dims: { check: (v) => isRecord(v) && Object.values(v).every(isInt), want: 'an object of whole numbers, e.g. {"batch": 1}' },
  shapes: {
    check: (v) => isRecord(v) && Object.values(v).every((s) => (typeof s === 'string' && isShapeText(s)) || (Array.isArray(s) && s.every(isInt))),
    want: 'an object of shapes, each a string of sizes in plain decimal digits or an array of whole numbers, e.g. {"image": "1x3x224x224"}',
  },
  gate: { check: (v) => typeof v === 'string' && v.trim() !== '', want: 'a gate expression string' },
  keep: { check: (v) => Array.isArray(v) && v.every((s) => typeof s === 'string'), want: 'an array of node names' },
  failOn: { check: (v) => v === 'kept', want: '"kept"' },
  probes: { check: (v) => isInt(v) && (v as number) >= 1 && (v as number) <= MAX_PROBES, want: `a whole number from 1 to ${MAX_PROBES}` },
  seed: { check: (v) => isInt(v) && (v as number) <= MAX_SEED, want: `a whole number from 0 to ${MAX_SEED}` },
  store: { check: (v) => v === 'float16', want: '"float16"' },
  strict: { check: (v) => typeof v === 'boolean', want: 'true or false' },
};

/** Read and check a config file: --config FILE when given, else pleat.config.json in `cwd` when present. */
export function loadConfig(explicit: string | undefined, cwd = process.cwd()): { config: PleatConfig; file: string | null; path: string | null } {
  const path = explicit ?? join(cwd, CONFIG_FILE);
  // Only a name with nothing behind it means "no config file": a symlink to a file moved away, or a link loop, is
  // a config that cannot be read (read as absent, its settings, "strict" among them, were silently lost).
  if (explicit === undefined && !lstatSync(path, { throwIfNoEntry: false })) return { config: {}, file: null, path: null };
  // messages name the file as the user knows it: as given, or pleat.config.json (in the working directory)
  const file = explicit ?? CONFIG_FILE;
  const cannot = (why: string) => new PleatError('bad-input', `--config ${file}: cannot read (${why})`);
  let text: string;
  try {
    const st = statSync(path);
    // (a FIFO or device would block the read until something writes to it, or forever)
    if (!st.isFile()) throw cannot(st.isDirectory() ? 'a folder, not a file' : 'not a regular file: a FIFO, socket or device');
    text = readFileSync(path, 'utf8');
  } catch (e) {
    if (e instanceof PleatError) throw e;
    throw cannot((e as NodeJS.ErrnoException).code ?? String(e));
  }
  let raw: unknown;
  try {
    raw = JSON.parse(text);
  } catch (e) {
    throw new PleatError('bad-input', `${file}: not valid JSON (${(e as Error).message.split('\n')[0]})`);
  }
  if (!isRecord(raw)) throw new PleatError('bad-input', `${file}: expected a JSON object of settings`);
  const twice = repeatedKey(text);
  if (twice !== null) throw new PleatError('usage', `${file}: the key '${twice}' is given twice; give it once`);
  for (const [key, value] of Object.entries(raw)) {
    // (own keys only: 'constructor' or 'toString' would otherwise find the object's inherited members)
    const rule = Object.hasOwn(KEYS, key) ? (KEYS as Record<string, { check: Check; want: string }>)[key] : undefined;
    if (!rule) throw new PleatError('usage', `${file}: unknown key '${key}' (known keys: ${Object.keys(KEYS).join(', ')})`);
    if (!rule.check(value)) throw new PleatError('usage', `${file}: '${key}' should be ${rule.want}`);
  }
  return { config: raw as PleatConfig, file, path };
}

/**
 * The first member name given twice in one object of valid JSON text, as a dotted path ('probes', 'dims.batch'),
 * or null. JSON.parse keeps the last of them (RFC 8259 leaves duplicate names to the reader), so a config holding
 * "probes" twice would run with one of them silently, where a flag given twice is refused. Names are compared
 * decoded ("s\u0065ed" is "seed").
 */
export function repeatedKey(text: string): string | null {
  // one frame per open object (its names so far, its path, the last name read) or array (null)
  const frames: Array<{ names: Set<string>; path: string; last: string } | null> = [];
  let wantName = false;
  for (let i = 0; i < text.length; i++) {
    const c = text[i];
    if (c === '"') {
      let end = i + 1;
      while (text[end] !== '"') end += text[end] === '\\' ? 2 : 1;
      const top = frames.at(-1);
      if (wantName && top) {
        const name = JSON.parse(text.slice(i, end + 1)) as string;
        if (top.names.has(name)) return top.path + name;
        top.names.add(name);
        top.last = name;
        wantName = false;
      }
      i = end;
    } else if (c === '{' || c === '[') {
      const top = frames.at(-1);
      const path = top ? `${top.path}${top.last}.` : '';
      frames.push(c === '{' ? { names: new Set(), path, last: '' } : null);
      wantName = c === '{';
    } else if (c === '}' || c === ']') {
      frames.pop();
    } else if (c === ',') {
      wantName = frames.at(-1) != null;
    }
  }
  return null;
}

/**
 * The files a run reads besides its models, as [path, what] for the output guard: the config file and every
 * --input value file. No output may replace one (a --report onto the --input .npy overwrote it).
 */
export function filesRead(configPath: string | null, inputs: ReadonlyMap<string, InputValue> = new Map()): Array<[string, string]> {
  const out: Array<[string, string]> = configPath === null ? [] : [[configPath, 'config file']];
  for (const [name, v] of inputs) if (v.file !== undefined) out.push([v.file, `--input file of '${name}'`]);
  return out;
}

/** The flags every command that runs a model shares (raw, as yargs parsed them). */
export interface RunFlags {
  input?: string[];
  shape?: string[];
  dim?: string[];
  seed?: number;
  probes?: number;
  gate?: string;
  strict?: boolean;
  maxProbeMemory?: string;
}

export interface RunSettings {
  inputs: Map<string, InputValue>;
  shapes: Map<string, number[]>;
  dims: Map<string, number>;
  seed?: number;
  probes?: number;
  gate?: string;
  /** --strict, else the config's strict, else false. */
  strict: boolean;
  maxProbeMemory?: number;
}

/** `--max-probe-memory`: a whole number of bytes, or with a K, M or G suffix (powers of 1024). */
export function parseBytes(flag: string, text: string): number {
  // (plain decimal digits, as every count flag takes them: ' 512M' is refused, not read as 512M)
  const m = /^(0|[1-9][0-9]*)([KMG]?)(i?B)?$/i.exec(text);
  const n = m ? Number(m[1]) * 1024 ** ' KMG'.indexOf((m[2] || ' ').toUpperCase()) : NaN;
  if (!Number.isSafeInteger(n) || n <= 0) throw new PleatError('usage', `--${flag} '${text}': give a number of bytes above 0, e.g. 536870912 or 512M`);
  return n;
}

/** Flags over config: input values loaded, shapes and dims merged per name, scalars taken from flags first. */
export function runSettings(config: PleatConfig, flags: RunFlags): RunSettings {
  const fromFlags = parseInputFlags({ input: flags.input, shape: flags.shape, dim: flags.dim });
  const fromConfig = parseInputFlags({
    shape: Object.entries(config.shapes ?? {}).map(([k, v]) => `${k}=${Array.isArray(v) ? v.join('x') : v}`),
    dim: Object.entries(config.dims ?? {}).map(([k, v]) => `${k}=${v}`),
  });
  // (checked here, before any work, not first when the whole-model check starts after a long fold)
  if (flags.seed !== undefined) checkSeed(flags.seed);
  if (flags.probes !== undefined) checkProbeCount(flags.probes);
  const maxProbeMemory = flags.maxProbeMemory === undefined ? undefined : parseBytes('max-probe-memory', String(flags.maxProbeMemory));
  return {
    // (within the limit the run will have: a value file too large for it is refused before it is read)
    inputs: withProbeMemory(maxProbeMemory, () => loadInputFiles(fromFlags.files)),
    shapes: new Map([...fromConfig.shapes, ...fromFlags.shapes]),
    dims: new Map([...fromConfig.dims, ...fromFlags.dims]),
    seed: flags.seed ?? config.seed,
    probes: flags.probes ?? config.probes,
    gate: flags.gate ?? config.gate,
    strict: flags.strict ?? config.strict ?? false,
    maxProbeMemory,
  };
}

/**
 * Which keep, dim and shape names came from the config file rather than a flag (a flag naming the same dim or
 * shape overrides the file's entry), so messages and hints can point at the file.
 */
export function nameOrigins(config: PleatConfig, file: string | null, flags: { keep?: readonly string[]; dim?: readonly string[]; shape?: readonly string[] }): NameOrigins {
  if (file === null) return {};
  const flagNames = (list: readonly string[] | undefined) => new Set((list ?? []).map((s) => s.split('=')[0]!.trim()));
  const fromFile = (names: Iterable<string>, overridden: Set<string>) =>
    Object.fromEntries([...names].filter((n) => !overridden.has(n)).map((n) => [n, file]));
  return {
    keep: fromFile(config.keep ?? [], new Set(flags.keep ?? [])),
    dims: fromFile(Object.keys(config.dims ?? {}), flagNames(flags.dim)),
    shapes: fromFile(Object.keys(config.shapes ?? {}), flagNames(flags.shape)),
  };
}

/** --keep adds to the config's keep list (first appearance wins the order). */
export function keepList(config: PleatConfig, flags: readonly string[] | undefined): string[] | undefined {
  const all = [...(config.keep ?? []), ...(flags ?? [])];
  return all.length ? [...new Set(all)] : undefined;
}
