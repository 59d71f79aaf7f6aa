// The plain form of a gate, evaluated without loading mathjs: comparisons of a metric with a number (or a number
// times a metric) joined by `and`, which is every default gate and most gates users write
// ("maxRel <= 1e-3 and cosine >= 0.99999", "maxAbs <= 1e-2 * peak"). Anything else returns undefined and goes
// to the full mathjs parser in gate.ts. The comparisons are exact IEEE comparisons, as gate.ts sets mathjs up
// to make them (NaN compares false everywhere, so a NaN metric fails a plain gate just as it fails there).

type Cmp = '<' | '<=' | '>' | '>=' | '==' | '!=';

export interface PlainClause {
  name: string;
  op: Cmp;
  /** The right-hand side: `value`, or `value * factorOf` when a metric follows. */
  value: number;
  factorOf?: string;
}

const NUMBER = String.raw`[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?`;
const NAME = String.raw`[A-Za-z][A-Za-z0-9]*`;
const CLAUSE = new RegExp(String.raw`^\s*(${NAME})\s*(<=|>=|==|!=|<|>)\s*(${NUMBER})\s*(?:\*\s*(${NAME})\s*)?$`);

/** The clauses of a plain gate whose names are all in `available`, or undefined when it is not plain. */
export function parsePlainGate(expr: string, available: readonly string[]): PlainClause[] | undefined {
  const parts = expr.split(/\band\b/);
  const allowed = new Set(available);
  const out: PlainClause[] = [];
  for (const p of parts) {
    const m = CLAUSE.exec(p);
    if (!m) return undefined;
    const [, name, op, num, factorOf] = m;
    if (!allowed.has(name!) || (factorOf !== undefined && !allowed.has(factorOf))) return undefined;
    out.push({ name: name!, op: op as Cmp, value: Number(num), ...(factorOf !== undefined ? { factorOf } : {}) });
  }
  return out.length ? out : undefined;
}

/** Evaluate plain clauses on a scope (every name present as a number: the caller checks). */
export function testPlain(clauses: readonly PlainClause[], scope: Readonly<Record<string, number | undefined>>): boolean {
  for (const c of clauses) {
    const x = scope[c.name]!;
    const y = c.factorOf === undefined ? c.value : c.value * scope[c.factorOf]!;
    let ok: boolean;
    switch (c.op) {
      case '<': ok = x < y; break;
      case '<=': ok = x <= y; break;
      case '>': ok = x > y; break;
      case '>=': ok = x >= y; break;
      case '==': ok = x === y; break;
      case '!=': ok = x !== y; break;
    }
    if (!ok) return false;
  }
  return true;
}
