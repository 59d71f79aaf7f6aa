// Gates: boolean expressions over an output's metrics, written by users as `--gate "EXPR"` and evaluated with a
// restricted mathjs instance. Before anything runs, the parsed tree is checked against a short allow-list
// (numbers, booleans, metric names, arithmetic, comparisons, and/or/not/xor, a few pure functions), so a gate
// cannot assign, define functions, build units or matrices, or reach mathjs' own import/evaluate/parse.
import { createRequire } from 'node:module';
import type { MathJsInstance, MathNode } from 'mathjs';
import { DataType, type DataTypeCode } from '../graph/ir.js';
import { PleatError } from '../errors.js';
import { parsePlainGate, testPlain } from './gate-plain.js';

/** Metric names every gate can use (see Metrics in metrics.ts: candidate float64 vs reference float64). */
export const METRIC_NAMES = ['maxAbs', 'maxRel', 'rms', 'cosine', 'nanMismatches', 'peak', 'count'] as const;

/**
 * Error-budget names (compare only): `own*` is the reference model run in float32 against itself in float64
 * (the rounding the model already has), `deploy*` is the candidate in float32 against the reference in float64,
 * `added*` = max(0, deploy - own): the error the rewrite adds beyond the model's own rounding.
 */
export const BUDGET_NAMES = ['ownAbs', 'ownRel', 'deployAbs', 'deployRel', 'addedAbs', 'addedRel'] as const;

export type GateScope = Partial<Record<(typeof METRIC_NAMES)[number] | (typeof BUDGET_NAMES)[number], number>>;

/**
 * Default gates by output element type. These thresholds are our own choice (common practice for judging a
 * rewrite against a float64 reference, not taken from a published source), sized from what a correct fold
 * costs: folded weights are rounded to their storage type, so the candidate differs from the reference by about
 * one storage rounding of each product, while a wrong fold (axis, sign, missing shift) is off by O(1) of the
 * output's scale on every element it touches.
 * - float64: rounding is ~1e-16, so anything past 1e-9 is a real difference.
 * - float32: one folded 3x3x64 convolution measured maxRel ~1.5e-5 (see REL_FLOOR in metrics.ts) and a
 *   12-layer folded chain ~6e-5 (test/verify/deep-chain.test.ts); 1e-3 leaves room for deeper networks while a
 *   wrong shift in one channel still fails. cosine >= 0.99999 bounds the relative RMS error near 4.5e-3 as a
 *   second, whole-output check.
 * - float16 / bfloat16: storage rounding is 2^-11 and 2^-8 of each weight, which makes per-element ratios near
 *   zero meaningless; these gates judge the largest error against the output's peak instead.
 * - integer and bool outputs must match exactly.
 */
export const DEFAULT_GATES = {
  float64: 'maxRel <= 1e-9 and cosine >= 0.999999999999',
  float32: 'maxRel <= 1e-3 and cosine >= 0.99999',
  float16: 'maxAbs <= 1e-2 * peak and cosine >= 0.9995',
  bfloat16: 'maxAbs <= 5e-2 * peak and cosine >= 0.995',
  exact: 'maxAbs == 0',
} as const;

/**
 * Default gate of `compare --simulate-int8 weights` for float outputs: 8-bit weights move every output by far more
 * than a fold may, so the float gates above would always fail; this one asks that the outputs keep their
 * direction (relative RMS error under about 4.5%). Our own choice, not from a published source: it catches a
 * layer whose narrow channels were rounded away, which is what the simulation is for.
 */
export const INT8_WEIGHTS_GATE = 'cosine >= 0.999';

export type DefaultGateKey = keyof typeof DEFAULT_GATES;

export function defaultGateKey(type: DataTypeCode): DefaultGateKey {
  switch (type) {
    case DataType.DOUBLE: return 'float64';
    case DataType.FLOAT: return 'float32';
    case DataType.FLOAT16: return 'float16';
    case DataType.BFLOAT16: return 'bfloat16';
    default: return 'exact';
  }
}

/** The default gate expression for an output of this element type. */
export function defaultGateFor(type: DataTypeCode): string {
  return DEFAULT_GATES[defaultGateKey(type)];
}

// ---- restricted mathjs --------------------------------------------------------------------------------

// relTol/absTol: mathjs compares numbers approximately by default (absTol 1e-15), which would make
// `maxAbs <= 1e-20` true for maxAbs = 1e-16. Gates compare exactly (relTol must be > 0; the smallest double
// makes it exact in practice).
// mathjs is loaded on first use: it costs about 90 MB of memory, which a fold of a large model without a gate
// should not pay.
let instance: { math: MathJsInstance; parse: MathJsInstance['parse'] } | undefined;
function restricted(): { math: MathJsInstance; parse: MathJsInstance['parse'] } {
  if (instance) return instance;
  const { all, create } = createRequire(import.meta.url)('mathjs') as typeof import('mathjs');
  const math = create(all, { relTol: Number.MIN_VALUE, absTol: 0 });
  // Keep our handle on this instance's parser before blocking the namespace's copy; nodes it parses compile
  // against the restricted namespace below.
  const parse = math.parse;
  const blocked = (name: string) => () => { throw new Error(`${name} is disabled in gates`); };
  math.import({
    import: blocked('import'), createUnit: blocked('createUnit'), evaluate: blocked('evaluate'),
    parse: blocked('parse'), simplify: blocked('simplify'), derivative: blocked('derivative'),
    resolve: blocked('resolve'), reviver: blocked('reviver'),
  }, { override: true });
  instance = { math, parse };
  return instance;
}

const OPERATORS = new Set([
  'add', 'subtract', 'multiply', 'divide', 'unaryMinus', 'unaryPlus', 'pow',
  'and', 'or', 'not', 'xor', 'smaller', 'smallerEq', 'larger', 'largerEq', 'equal', 'unequal',
]);
const FUNCTIONS = new Set(['abs', 'min', 'max', 'sqrt', 'log10', 'log2', 'exp']);
const CONSTANTS = new Set(['Infinity']);

export interface Gate {
  expr: string;
  /** Metric and budget names the expression reads. */
  names: string[];
  /** True when the metrics pass. Missing names in the scope are an error, not a silent pass. */
  test(scope: GateScope): boolean;
  /** The bounds the gate puts on maxAbs or maxRel directly (see GateLimit), for reports that draw them. */
  limits(scope: GateScope): GateLimit[];
}

/**
 * A bound a gate puts on one metric: `maxAbs <= 1e-2 * peak` gives metric maxAbs and limit 1e-2 * peak. Only
 * comparisons joined by `and` (at the top) count; a bound under `or` or `not` is no bound on its own.
 */
export interface GateLimit {
  metric: 'maxAbs' | 'maxRel';
  limit: number;
}

const BOUNDED = new Set(['maxAbs', 'maxRel']);
const UPPER = new Set(['smaller', 'smallerEq', 'equal']);
const LOWER = new Set(['larger', 'largerEq', 'equal']);

function limitsOf(node: MathNode, scope: GateScope): GateLimit[] {
  const n = node as unknown as { type: string; fn?: string; args?: MathNode[]; content?: MathNode; name?: string };
  if (n.type === 'ParenthesisNode') return limitsOf(n.content!, scope);
  if (n.type !== 'OperatorNode') return [];
  if (n.fn === 'and') return n.args!.flatMap((a) => limitsOf(a, scope));
  const [l, r] = n.args ?? [];
  const symbol = (m: MathNode | undefined) => (m?.type === 'SymbolNode' ? (m as unknown as { name: string }).name : '');
  const reads = (m: MathNode) => m.filter((x) => x.type === 'SymbolNode' && BOUNDED.has((x as unknown as { name: string }).name)).length > 0;
  const bound = (metric: string, other: MathNode): GateLimit[] => {
    if (reads(other)) return [];
    const v: unknown = other.compile().evaluate({ ...scope });
    return typeof v === 'number' ? [{ metric: metric as GateLimit['metric'], limit: v }] : [];
  };
  if (l && r && UPPER.has(n.fn!) && BOUNDED.has(symbol(l))) return bound(symbol(l), r);
  if (l && r && LOWER.has(n.fn!) && BOUNDED.has(symbol(r))) return bound(symbol(r), l);
  return [];
}

/**
 * Parse and check a gate. `available` are the names it may use (default: metrics and budget names); a syntax
 * error, a disallowed construct or an unknown name is a one-line PleatError('usage') naming the gate.
 * `plainForm: false` sends even a plain gate through mathjs (tests compare the two evaluations).
 */
export function parseGate(expr: string, available: readonly string[] = [...METRIC_NAMES, ...BUDGET_NAMES], opts: { plainForm?: boolean } = {}): Gate {
  const fail = (why: string): never => { throw new PleatError('usage', `gate '${expr}' ${why}`); };
  if (expr.trim() === '') fail('is empty: write a condition such as "maxRel <= 1e-4"');
  // the common plain form needs no expression library (loading mathjs is most of a small model's start-up)
  const plain = opts.plainForm === false ? undefined : parsePlainGate(expr, available);
  if (plain) {
    const names = [...new Set(plain.flatMap((c) => (c.factorOf ? [c.name, c.factorOf] : [c.name])))].sort();
    return {
      expr,
      names,
      test(scope: GateScope): boolean {
        for (const n of names) {
          if (typeof scope[n as keyof GateScope] !== 'number') fail(`needs '${n}', which was not measured`);
        }
        return testPlain(plain, scope);
      },
      limits(scope: GateScope): GateLimit[] {
        return plain.filter((c) => BOUNDED.has(c.name) && ['<', '<=', '=='].includes(c.op) && !(c.factorOf && BOUNDED.has(c.factorOf)))
          .map((c) => ({ metric: c.name as GateLimit['metric'], limit: c.factorOf ? c.value * (scope[c.factorOf as keyof GateScope] ?? NaN) : c.value }))
          .filter((l) => !Number.isNaN(l.limit));
      },
    };
  }
  let node: MathNode;
  try {
    node = restricted().parse(expr);
  } catch (e) {
    return fail(`does not parse: ${(e as Error).message}`);
  }
  const names = new Set<string>();
  const allowed = new Set(available);
  const check = (n: MathNode): void => {
    switch (n.type) {
      case 'ConstantNode': {
        const v = (n as unknown as { value: unknown }).value;
        if (typeof v !== 'number' && typeof v !== 'boolean') fail(`uses ${JSON.stringify(v)}: only numbers and true/false are allowed`);
        return;
      }
      case 'SymbolNode': {
        const name = (n as unknown as { name: string }).name;
        if (CONSTANTS.has(name)) return;
        if (!allowed.has(name)) {
          const known = [...METRIC_NAMES, ...BUDGET_NAMES] as readonly string[];
          if (known.includes(name)) fail(`uses '${name}', which is not measured here (available: ${available.join(', ')})`);
          fail(`uses unknown name '${name}' (known: ${available.join(', ')})`);
        }
        names.add(name);
        return;
      }
      case 'ParenthesisNode':
        check((n as unknown as { content: MathNode }).content);
        return;
      case 'OperatorNode': {
        const o = n as unknown as { fn: string; op: string; args: MathNode[] };
        if (!OPERATORS.has(o.fn)) fail(`uses operator '${o.op}', which gates do not allow`);
        o.args.forEach(check);
        return;
      }
      case 'FunctionNode': {
        const f = n as unknown as { fn: MathNode & { name?: string }; args: MathNode[] };
        const name = f.fn.type === 'SymbolNode' ? f.fn.name! : '';
        if (!FUNCTIONS.has(name)) fail(`calls '${name || f.fn.toString()}': gates allow only ${[...FUNCTIONS].join(', ')}`);
        f.args.forEach(check);
        return;
      }
      case 'AssignmentNode': case 'FunctionAssignmentNode':
        return fail('assigns a value: a gate is a condition, such as "maxRel <= 1e-4"');
      default:
        return fail(`uses a ${n.type.replace(/Node$/, '').toLowerCase()} expression, which gates do not allow`);
    }
  };
  check(node);
  const code = node.compile();
  const run = (scope: GateScope): unknown => code.evaluate({ ...scope });
  // Evaluate once on neutral values so a gate that is not a condition (e.g. "maxAbs") fails now, not later.
  const probe: Record<string, number> = {};
  for (const n of names) probe[n] = 0;
  let sample: unknown;
  try { sample = run(probe); } catch (e) { return fail(`cannot be evaluated: ${(e as Error).message}`); }
  if (typeof sample !== 'boolean') fail('does not give true or false: write a comparison such as "maxAbs <= 1e-5"');
  const nameList = [...names].sort();
  return {
    expr,
    names: nameList,
    test(scope: GateScope): boolean {
      for (const n of nameList) {
        if (typeof scope[n as keyof GateScope] !== 'number') fail(`needs '${n}', which was not measured`);
      }
      return run(scope) === true;
    },
    limits(scope: GateScope): GateLimit[] {
      try { return limitsOf(node, scope); } catch { return []; } // a bound that cannot be evaluated is not drawn
    },
  };
}

/** Exported for tests: the restricted instance, with import/evaluate/parse blocked. */
export function gateMath(): MathJsInstance {
  return restricted().math;
}
