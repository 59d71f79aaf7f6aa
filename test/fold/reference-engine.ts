// The fold driver as it was before its use-def index became incremental: every sweep, the clean-up and the
// final analysis rebuild the scopes and their indexes from the whole model. Kept here only so the equivalence
// test can compare the engine's written bytes with it in the same run.
import type { Graph, Model, Node } from '../../src/graph/ir.js';
import { attrTensor } from '../../src/graph/ir.js';
import { tensorByteSize } from '../../src/graph/tensor.js';
import { touch } from '../../src/graph/edit.js';
import { validateModel } from '../../src/graph/validate.js';
import { makeContext, freshName, type FoldContext } from '../../src/fold/context.js';
import { applyEdit, newEdit, regionAfter, regionBefore, type Edit } from '../../src/fold/apply.js';
import { assessRun, cloneCost, findingsOf, foldHint, layerNormHint, writtenOutHint } from '../../src/fold/analyze.js';
import { writtenOutNorm } from '../../src/fold/norms.js';
import { entryKind } from '../../src/fold/steps.js';
import type { RuleMatch } from '../../src/fold/rules/index.js';
import { collectRun, isStep, stepOf } from '../../src/fold/run.js';
import { buildScopes, eachGraph, labelOf, type Scope } from '../../src/fold/scope.js';
import type { EntryKind, FoldLedger, FoldOptions, LedgerEntry, ProofFigures, RewrittenNode } from '../../src/fold/types.js';

/** Apply the node and initializer list changes of every edited graph. */
function flushPending(ctx: FoldContext): void {
  for (const [g, p] of ctx.pending) {
    if (!p.removed.size && !p.inserts.size && !p.initializers.length && !p.inputs.length) continue;
    const nodes: Node[] = [];
    // An inserted node may have inserts of its own (the bias Add after a cloned layer).
    const emit = (n: Node) => {
      if (!p.removed.has(n)) nodes.push(n);
      for (const a of p.inserts.get(n) ?? []) emit(a);
    };
    for (const n of g.nodes) emit(n);
    g.nodes = nodes;
    if (p.initializers.length) g.initializers = [...g.initializers, ...p.initializers];
    if (p.inputs.length) g.inputs = [...g.inputs, ...p.inputs];
    touch(g);
  }
  ctx.pending.clear();
}

function cleanUp(model: Model, released: Set<string>, gone: Set<string>): void {
  const scopes = buildScopes(model);
  const dropInits = new Map<Graph, Set<string>>();
  const dropNodes = new Map<Graph, Set<Node>>();
  const unread = (s: Scope, v: string) => s.ud.consumers(v).length === 0 && !s.ud.isGraphOutput(v) && !s.ud.isGraphInput(v);
  for (const s of scopes) {
    for (const t of s.graph.initializers) {
      if (!released.has(t.name) || !unread(s, t.name)) continue;
      if (!dropInits.has(s.graph)) dropInits.set(s.graph, new Set());
      dropInits.get(s.graph)!.add(t.name);
      gone.add(t.name);
    }
    for (const n of s.graph.nodes) {
      const v = n.outputs[0];
      if (n.opType !== 'Constant' || !v || !released.has(v) || !unread(s, v)) continue;
      if (!dropNodes.has(s.graph)) dropNodes.set(s.graph, new Set());
      dropNodes.get(s.graph)!.add(n);
      gone.add(v);
    }
  }
  for (const [g, names] of dropInits) { g.initializers = g.initializers.filter((t) => !names.has(t.name)); touch(g); }
  for (const [g, nodes] of dropNodes) { g.nodes = g.nodes.filter((n) => !nodes.has(n)); touch(g); }
  if (!gone.size) return;
  for (const s of scopes) {
    const g = s.graph;
    const defined = (v: string) => (s.ud.producer(v) !== undefined && !dropNodes.get(g)?.has(s.ud.producer(v)!))
      || (s.ud.initializer(v) !== undefined && !dropInits.get(g)?.has(v)) || s.ud.isGraphInput(v);
    const keep = g.valueInfo.filter((vi) => !gone.has(vi.name) || defined(vi.name));
    if (keep.length !== g.valueInfo.length) { g.valueInfo = keep; touch(g); }
  }
}

const MAX_PASSES = 64;

function countNodes(model: Model): number {
  let n = 0;
  eachGraph(model.graph, (g) => { n += g.nodes.length; });
  return n;
}

/** Bytes of initializer and Constant-node tensor data, subgraphs included. */
function weightBytes(model: Model): number {
  let b = 0;
  eachGraph(model.graph, (g) => {
    for (const t of g.initializers) b += tensorByteSize(t);
    for (const n of g.nodes) {
      if (n.opType !== 'Constant') continue;
      const t = attrTensor(n, 'value');
      if (t) b += tensorByteSize(t);
    }
  });
  return b;
}

/**
 * --clone-shared: a copy of the producer for the norm path alone (same inputs, a fresh output), placed right after
 * it; the match is rewritten on the copy, and the original joins the proof region so its other readers are checked.
 */
function cloneForRun(ctx: FoldContext, edit: Edit, m: RuleMatch): RuleMatch[] {
  const orig = m.layer.node;
  const clone: Node = {
    name: freshName(ctx, `${m.layer.label}.clone`), opType: orig.opType, domain: orig.domain, inputs: [...orig.inputs],
    outputs: [freshName(ctx, `${orig.outputs[0]!}.clone`)], attributes: [...orig.attributes], docString: '', extra: [],
  };
  edit.inserts.push({ node: clone, after: orig });
  edit.regionNodes.push(orig);
  return [{ ...m, layer: { ...m.layer, node: clone } }];
}

/** One sweep over every graph; returns whether anything changed or was put off to the next sweep. */
function sweep(ctx: FoldContext, model: Model, folded: LedgerEntry[], released: Set<string>, gone: Set<string>, rewritten: Map<Node, RewrittenNode>): boolean {
  let changed = false;
  const prove = ctx.options.prove;
  for (const scope of buildScopes(model, ctx.labels, ctx.options.inputShapes)) {
    const cache = new Map();
    const dirty = new Set<Node>();
    for (const node of [...scope.graph.nodes]) {
      if (dirty.has(node)) continue;
      const s = stepOf(ctx, scope, cache, node);
      if (!isStep(s)) continue;
      const run = collectRun(ctx, scope, cache, s);
      const involved: Node[] = run.steps.map((x) => x.node);
      const p = scope.ud.producer(run.top);
      if (p) involved.push(p);
      involved.push(...scope.ud.consumers(run.bottom));
      if (involved.some((n) => dirty.has(n))) { changed = true; continue; } // stale index: next sweep
      const o = assessRun(ctx, run);
      if (o.kind !== 'match') continue;
      const edit = newEdit(scope);
      const matches = o.clone ? cloneForRun(ctx, edit, o.matches[0]!) : o.matches;
      const outputs: string[] = [];
      for (const m of matches) {
        m.rule.rewrite(ctx, m, edit);
        outputs.push(...edit.regionOutputs);
      }
      edit.regionOutputs = [...new Set([...outputs, ...edit.regionNodes.flatMap((n) => n.outputs.filter((v) => v !== ''))])];
      const before = prove ? regionBefore(edit) : undefined;
      const inPlace = ctx.options.reuseBuffers ?? true;
      const undo = applyEdit(ctx, edit, !prove && inPlace);
      const names = run.steps.map((x) => ctx.labels.get(x.node) ?? x.node.name);
      for (const n of [...involved, ...matches.map((m) => m.layer.node), ...edit.changes.map((c) => c.node)]) dirty.add(n);
      changed = true;
      const targets = o.matches.map((m) => m.layer.label);
      const target = targets.join(', ');
      const direction = o.matches[0]!.rule.direction;
      let proof: ProofFigures | undefined;
      if (prove) {
        const r = prove({ before: before!, after: regionAfter(edit), opsetOf: ctx.opsetOf, nodes: names, target, direction, graph: scope.path });
        if (typeof r === 'boolean' ? !r : !r.passed) {
          undo();
          for (const x of run.steps) ctx.proofFailed.add(x.node);
          continue;
        }
        if (typeof r !== 'boolean') proof = r.proof;
      }
      if (prove && inPlace) {
        // The proof ran on a scaled copy of each weight; once proven, the copy goes and the weight is scaled where
        // it lies (on its way to the output, for weights still on disk), as an unproven fold does: the same
        // products rounded the same way, without holding every folded weight in memory.
        undo();
        applyEdit(ctx, edit, true);
      }
      const hint = foldHint(o.matches, o.clone);
      const copy = o.clone ? ctx.labels.get(matches[0]!.layer.node) ?? matches[0]!.layer.node.name : undefined;
      const entry = (node: Node, op: string, kind: EntryKind, h: string, cloneBytes = 0): LedgerEntry => ({
        node: ctx.labels.get(node) ?? node.name, op, kind, status: 'folded', direction, target, targets, reason: null, hint: null, effect: h, graph: scope.path, cloneBytes,
        ...(copy !== undefined ? { copy } : {}),
        ...(proof ? { proof } : {}),
      });
      // A normalization written out as primitive ops keeps its statistics; its tail moved, so it is listed as folded.
      const chain = scope.ud.producer(run.top);
      const written = chain ? writtenOutNorm(scope, chain) : undefined;
      const solelyTail = scope.ud.consumers(run.top).length === 1 && !scope.ud.isGraphOutput(run.top); // (as analyze.ts judges it)
      if (chain && written && solelyTail && run.steps[0]!.kind === 'elementwise' && entryKind(scope, run.steps[0]!.node) === 'normalization') {
        folded.push(entry(chain, written, 'normalization', writtenOutHint(targets)));
      }
      // what the whole-model check watches: the layers whose weights changed, nodes created or changed in kind
      const changedKind = edit.changes.filter((c) => c.opType !== undefined || c.attributes !== undefined).map((c) => c.node);
      for (const n of [...matches.map((mm) => mm.layer.node), ...edit.inserts.map((i) => i.node), ...changedKind]) {
        if (!rewritten.has(n)) rewritten.set(n, { node: n, label: ctx.labels.get(n) ?? n.name, graph: scope.path });
      }
      run.steps.forEach((x, i) => {
        folded.push(entry(x.node, x.node.opType, entryKind(scope, x.node), x.kind === 'layer-norm' ? layerNormHint(targets) : hint, i === 0 && o.clone ? cloneCost(o.matches[0]!) : 0));
      });
      for (const r of edit.released) released.add(r);
      for (const v of edit.goneValues) gone.add(v);
    }
  }
  flushPending(ctx);
  return changed;
}

/**
 * Fold every normalization that can be folded exactly. Edits `model` in place and returns it with the ledger:
 * one entry per normalization (folded, or kept with its reason), node and weight-byte totals.
 */
export function referenceFoldModel(model: Model, options: FoldOptions = {}): { model: Model; ledger: FoldLedger; rewritten: RewrittenNode[] } {
  const ctx = makeContext(model, options);
  const nodesBefore = countNodes(model);
  const bytesBefore = weightBytes(model);
  // Ledger order: where each node stood in the original model.
  const order = new Map<string, number>();
  for (const s of buildScopes(model, ctx.labels, ctx.options.inputShapes)) for (const n of s.graph.nodes) order.set(`${s.path}\u0000${labelOf(s, n)}`, order.size);
  const folded: LedgerEntry[] = [];
  const released = new Set<string>();
  const gone = new Set<string>();
  const touched = new Map<Node, RewrittenNode>();
  for (let pass = 0; pass < MAX_PASSES && sweep(ctx, model, folded, released, gone, touched); pass++) { /* until nothing changes */ }
  if (folded.length) {
    cleanUp(model, released, gone);
    validateModel(model);
  }
  // Every normalization still in the model, with its reason, from the same analysis audit runs.
  // (A norm whose statistics stay shows up again after its tail moved: the folded entry stands.)
  const done = new Set(folded.map((e) => `${e.graph}\u0000${e.node}`));
  const kept: LedgerEntry[] = findingsOf(ctx, model).filter((f) => !done.has(`${f.graph}\u0000${f.node}`))
    .map((f) => ({ ...f, status: 'kept' as const }));
  const normalizations = [...folded, ...kept].sort((a, b) => (order.get(`${a.graph}\u0000${a.node}`) ?? 1e15) - (order.get(`${b.graph}\u0000${b.node}`) ?? 1e15));
  // a node a later fold or the clean-up removed is no longer in the model to be watched
  const present = new Set<Node>();
  eachGraph(model.graph, (g) => { for (const n of g.nodes) present.add(n); });
  return {
    model,
    ledger: { normalizations, nodesBefore, nodesAfter: countNodes(model), bytesBefore, bytesAfter: weightBytes(model) },
    rewritten: [...touched.values()].filter((r) => present.has(r.node)),
  };
}
