// Names the user gives (--keep NODE, --dim SYMBOL=N, --shape INPUT=DIMS, and the same keys of a config file)
// must match something: a typo in --keep would otherwise fold the very norm the user meant to keep. The rule
// for runs over several models (a batch, or a config file shared by them): a name must match in at least one
// model of the run. A name from a config file is reported as coming from that file.
import type { Model } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import { analyze } from '../fold/index.js';
import { eachGraph } from '../fold/scope.js';
import { asMap, dimSymbols, type MapOrRecord } from '../verify/inputs.js';

/** Where each name came from: a flag (the default) or a config file, per kind and name. */
export interface NameOrigins {
  keep?: Record<string, string>;
  dims?: Record<string, string>;
  shapes?: Record<string, string>;
}

export interface GivenNames {
  keep?: readonly string[];
  dims?: Iterable<string>;
  shapes?: Iterable<string>;
  origins?: NameOrigins;
}

/** The names a job's options give, checked against its one model unless the caller checked a batch already. */
export function checkJobNames(model: Model, label: string, opts: { keep?: readonly string[]; dims?: MapOrRecord<number>; shapes?: MapOrRecord<number[]>; origins?: NameOrigins; namesChecked?: boolean }): void {
  if (opts.namesChecked) return;
  const keep = opts.keep ?? [];
  const dims = [...asMap(opts.dims).keys()];
  const shapes = [...asMap(opts.shapes).keys()];
  if (!keep.length && !dims.length && !shapes.length) return;
  checkNames([modelNames(model, label, keep.length > 0)], { keep, dims, shapes, origins: opts.origins });
}

const FLAG = { keep: '--keep', dims: '--dim', shapes: '--shape' } as const;
const CONFIG_KEY = { keep: 'keep', dims: 'dims', shapes: 'shapes' } as const;

/** How the message names the value: `--keep x` for a flag, `'x' under "keep" in FILE` for a config file. */
export function nameSource(kind: keyof typeof FLAG, name: string, origins: NameOrigins | undefined): string {
  const from = origins?.[kind]?.[name];
  return from === undefined || from.startsWith('--') ? `${FLAG[kind]} ${name}` : `'${name}' under "${CONFIG_KEY[kind]}" in ${from}`;
}

const where = (labels: readonly string[]) => (labels.length === 1 ? labels[0]! : `any of the ${labels.length} models`);

/** What of a model names can match: its normalizations, every node's op, dim symbols and input names. */
export interface ModelNames {
  label: string;
  norms: Set<string>;
  nodes: Map<string, string>;
  symbols: Set<string>;
  inputs: Set<string>;
}

/** The names of one model (small: a batch keeps these, not the models). `norms` only when keep names are given. */
export function modelNames(model: Model, label: string, withNorms = true): ModelNames {
  const nodes = new Map<string, string>();
  eachGraph(model.graph, (g) => { for (const n of g.nodes) if (n.name && !nodes.has(n.name)) nodes.set(n.name, n.opType); });
  return {
    label,
    norms: withNorms ? new Set(analyze(model, {}).map((f) => f.node)) : new Set(),
    nodes,
    symbols: dimSymbols([model.graph]),
    inputs: new Set(model.graph.inputs.map((i) => i.name)),
  };
}

/**
 * Throws a usage PleatError for the first name that matches nothing in any of `models`: a keep name must be a
 * normalization pleat reports (or an affine step it would fold), a dim a symbol of some graph input, a shape
 * the name of a graph input.
 */
export function checkNames(models: readonly ModelNames[], given: GivenNames): void {
  const labels = models.map((m) => m.label);
  const union = (pick: (m: ModelNames) => Iterable<string>) => new Set(models.flatMap((m) => [...pick(m)]));
  const norms = union((m) => m.norms);
  for (const name of given.keep ?? []) {
    if (norms.has(name)) continue;
    const other = models.find((m) => m.nodes.has(name));
    const what = other
      ? `node '${name}' in ${other.label} is a ${other.nodes.get(name)}, not a normalization pleat could fold (so keeping it changes nothing)`
      : `no normalization of that name in ${where(labels)} (${norms.size ? `normalizations: ${[...norms].slice(0, 8).join(', ')}${norms.size > 8 ? ', ...' : ''}` : 'there are none'})`;
    throw new PleatError('usage', `${nameSource('keep', name, given.origins)}: ${what}`);
  }
  const symbols = union((m) => m.symbols);
  for (const sym of given.dims ?? []) {
    if (!symbols.has(sym)) {
      throw new PleatError('usage', `${nameSource('dims', sym, given.origins)}: no input of ${where(labels)} has a dynamic dim named '${sym}' (dims: ${[...symbols].sort().join(', ') || 'none'})`);
    }
  }
  const inputs = union((m) => m.inputs);
  for (const name of given.shapes ?? []) {
    if (!inputs.has(name)) {
      const none = labels.length === 1 ? `${labels[0]} has no input named '${name}'` : `none of the ${labels.length} models has an input named '${name}'`;
      throw new PleatError('usage', `${nameSource('shapes', name, given.origins)}: ${none} (inputs: ${[...inputs].join(', ') || 'none'})`);
    }
  }
}
