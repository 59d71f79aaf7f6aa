// The driver: applies the rules until nothing changes, in the main graph and in every If/Loop/Scan body,
// proves each fold when a prover is given (a failed proof reverts that fold), cleans up, and returns the
// ledger. Each match is rewritten right after it is found, so at most one decoded weight is alive at a time.
import type { Model, Node } from '../graph/ir.js';
import { attrTensor } from '../graph/ir.js';
import { tensorByteSize } from '../graph/tensor.js';
import { validateModel } from '../graph/validate.js';
import { makeContext, type FoldContext } from './context.js';
import { cleanUp } from './cleanup.js';
import { applyEdit, flushPending, newEdit, regionAfter, regionBefore, type Edit } from './apply.js';
import { assessRun, cloneCost, findingsOf, foldHint, layerNormHint, writtenOutHint } from './analyze.js';
import { freshName } from './context.js';
import { writtenOutNorm } from './norms.js';
import { entryKind, type AffineStep } from './steps.js';
import type { RuleMatch } from './rules/index.js';
import { collectRun, isStep, mayBeStep, stepOf } from './run.js';
import { buildScopes, eachGraph, forgetDerived, labelOf, type Scope } from './scope.js';
import { editableUseDef, type EditableUseDef } from '../graph/usedef.js';
import { nameTable, type NameTable } from '../graph/names.js';
import type { Direction, EntryKind, FoldLedger, FoldOptions, LedgerEntry, ProofFigures, RewrittenNode } from './types.js';

const MAX_PASSES = 64;

export function countNodes(model: Model): number {
  let n = 0;
  eachGraph(model.graph, (g) => { n += g.nodes.length; });
  return n;
}

/** Bytes of initializer and Constant-node tensor data, subgraphs included. */
export function weightBytes(model: Model): number {
  let b = 0;
  eachGraph(model.graph, (g) => {
    const inits = g.initializers, nodes = g.nodes;
    for (let i = 0; i < inits.length; i++) b += tensorByteSize(inits[i]!);
    for (let i = 0; i < nodes.length; i++) {
      const n = nodes[i]!;
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
function sweep(ctx: FoldContext, scopes: Scope[], folded: LedgerEntry[], gone: string[], watched: Watched): boolean {
  let changed = false;
  const prove = ctx.options.prove;
  const inPlace = ctx.options.reuseBuffers ?? true;
  // what a scope built afresh would know: the index is current (flushPending keeps it so), derived caches start over
  for (const scope of scopes) forgetDerived(scope);
  // (indexed loops and no closures made per fold: this body runs once per fold, 10^5 times in a large graph, and
  // what it allocates is what the collector spends its time on)
  for (const scope of scopes) {
    const cache = new Map();
    // every node a fold of this sweep touched: the index answers for the graph as the sweep found it, so a run
    // that meets one of them waits for the next sweep
    const dirty = new Set<Node>();
    const nodes = scope.graph.nodes.slice();
    const ud = scope.ud;
    for (let i = 0; i < nodes.length; i++) {
      const node = nodes[i]!;
      if (!mayBeStep(node) || dirty.has(node)) continue;
      const s = stepOf(ctx, scope, cache, node);
      if (!isStep(s)) continue;
      const run = collectRun(ctx, scope, cache, s);
      const steps = run.steps;
      const p = ud.producer(run.top);
      const readers = ud.consumers(run.bottom);
      if (anyDirty(dirty, steps, p, readers)) { changed = true; continue; } // stale index: next sweep
      const o = assessRun(ctx, run);
      if (o.kind !== 'match') continue;
      const edit = newEdit(scope);
      const matches = o.clone ? cloneForRun(ctx, edit, o.matches[0]!) : o.matches;
      const outputs: string[] = [];
      for (let k = 0; k < matches.length; k++) {
        matches[k]!.rule.rewrite(ctx, matches[k]!, edit);
        if (prove) outputs.push(...edit.regionOutputs);
      }
      // (the region's outputs and the nodes' names are for the proof alone)
      if (prove) edit.regionOutputs = [...new Set([...outputs, ...edit.regionNodes.flatMap((n) => n.outputs.filter((v) => v !== ''))])];
      const before = prove ? regionBefore(edit) : undefined;
      const undo = applyEdit(ctx, edit, !prove && inPlace, prove !== undefined);
      for (let k = 0; k < steps.length; k++) dirty.add(steps[k]!.node);
      if (p) dirty.add(p);
      for (let k = 0; k < readers.length; k++) dirty.add(readers[k]!);
      // (the layers and changed nodes are mostly among those already: each add is a probe into a set of every node
      // touched this sweep)
      for (let k = 0; k < matches.length; k++) if (!isAround(matches[k]!.layer.node, steps, p, readers)) dirty.add(matches[k]!.layer.node);
      for (let k = 0; k < edit.changes.length; k++) if (!isAround(edit.changes[k]!.node, steps, p, readers)) dirty.add(edit.changes[k]!.node);
      changed = true;
      const targets: string[] = [];
      for (let k = 0; k < o.matches.length; k++) targets.push(o.matches[k]!.layer.label);
      const target = targets.length === 1 ? targets[0]! : targets.join(', ');
      const direction = o.matches[0]!.rule.direction;
      let proof: ProofFigures | undefined;
      if (prove) {
        const names = steps.map((x) => ctx.labels.get(x.node) ?? x.node.name);
        const r = prove({ before: before!, after: regionAfter(edit), opsetOf: ctx.opsetOf, nodes: names, target, direction, graph: scope.path });
        if (typeof r === 'boolean' ? !r : !r.passed) {
          undo();
          for (const x of steps) ctx.proofFailed.add(x.node);
          continue;
        }
        if (typeof r !== 'boolean') proof = r.proof;
      }
      if (prove && inPlace) {
        // The proof ran on a scaled copy of each weight; once proven, the copy goes and the weight is scaled where
        // it lies (on its way to the output, for weights still on disk), as an unproven fold does: the same
        // products rounded the same way, without holding every folded weight in memory.
        undo();
        applyEdit(ctx, edit, true, false);
      }
      const hint = foldHint(o.matches, o.clone);
      // (with --clone-shared the rewritten layer is the copy: named in the entries, since its weights are what ships)
      const copy = o.clone ? ctx.labels.get(matches[0]!.layer.node) ?? matches[0]!.layer.node.name : undefined;
      const fold: FoldFacts = { direction, target, targets, graph: scope.path, proof, copy };
      // A normalization written out as primitive ops keeps its statistics; its tail moved, so it is listed as folded.
      // (the index still answers for the graph as the sweep found it: p is the producer of the run's input)
      const written = p && steps[0]!.kind === 'elementwise' ? writtenOutNorm(scope, p) : undefined;
      if (written && ud.consumers(run.top).length === 1 && !ud.isGraphOutput(run.top) && entryKind(scope, steps[0]!.node) === 'normalization') { // (as analyze.ts judges it)
        folded.push(ledgerEntry(ctx, fold, p!, written, 'normalization', writtenOutHint(targets), 0));
      }
      // what the whole-model check watches: the layers whose weights changed, nodes created or changed in kind
      // (`matches`, not `o.matches`: with --clone-shared the copy was rewritten and the original left as it was)
      for (let k = 0; k < matches.length; k++) watch(watched, matches[k]!.layer.node, scope.path);
      for (let k = 0; k < edit.inserts.length; k++) watch(watched, edit.inserts[k]!.node, scope.path);
      for (let k = 0; k < edit.changes.length; k++) {
        const c = edit.changes[k]!;
        if (c.opType !== undefined || c.attributes !== undefined) watch(watched, c.node, scope.path);
      }
      for (let k = 0; k < steps.length; k++) {
        const x = steps[k]!;
        folded.push(ledgerEntry(ctx, fold, x.node, x.node.opType, entryKind(scope, x.node), x.kind === 'layer-norm' ? layerNormHint(targets) : hint,
          k === 0 && o.clone ? cloneCost(o.matches[0]!) : 0));
      }
      for (let k = 0; k < edit.goneValues.length; k++) gone.push(edit.goneValues[k]!);
    }
  }
  flushPending(ctx);
  return changed;
}

/** Whether `n` is one of the run's nodes or its neighbours. */
function isAround(n: Node, steps: readonly AffineStep[], p: Node | undefined, readers: readonly Node[]): boolean {
  if (n === p || readers.includes(n)) return true;
  for (let k = 0; k < steps.length; k++) if (steps[k]!.node === n) return true;
  return false;
}

/** Whether a fold of this sweep touched any node of the run or its neighbours. */
function anyDirty(dirty: Set<Node>, steps: readonly AffineStep[], p: Node | undefined, readers: readonly Node[]): boolean {
  if (dirty.size === 0) return false;
  for (let k = 0; k < steps.length; k++) if (dirty.has(steps[k]!.node)) return true;
  if (p && dirty.has(p)) return true;
  for (let k = 0; k < readers.length; k++) if (dirty.has(readers[k]!)) return true;
  return false;
}

/** What every ledger entry of one fold shares. */
interface FoldFacts { direction: Direction; target: string; targets: string[]; graph: string; proof: ProofFigures | undefined; copy: string | undefined }

function ledgerEntry(ctx: FoldContext, f: FoldFacts, node: Node, op: string, kind: EntryKind, effect: string, cloneBytes: number): LedgerEntry {
  const e: LedgerEntry = {
    node: ctx.labels.get(node) ?? node.name, op, kind, status: 'folded', direction: f.direction, target: f.target, targets: f.targets, reason: null, hint: null,
    effect, graph: f.graph, cloneBytes,
  };
  if (f.copy !== undefined) e.copy = f.copy;
  if (f.proof) e.proof = f.proof; // (last, as the report lists it)
  return e;
}

/**
 * What the whole-model check watches, as the folds rewrote it: each node with its graph's path, a node again each
 * time it is rewritten (lists, not a map: only a proven fold's check asks, see watchedStill).
 */
interface Watched { nodes: Node[]; graphs: string[] }

function watch(w: Watched, n: Node, graph: string): void {
  w.nodes.push(n);
  w.graphs.push(graph);
}

/** The watched nodes still in the model, once each, in the order they were first rewritten. */
function watchedStill(ctx: FoldContext, w: Watched, removed: readonly Node[]): RewrittenNode[] {
  const seen = new Set<Node>(removed);
  const out: RewrittenNode[] = [];
  for (let i = 0; i < w.nodes.length; i++) {
    const node = w.nodes[i]!;
    if (seen.has(node)) continue;
    seen.add(node);
    out.push({ node, label: ctx.labels.get(node) ?? node.name, graph: w.graphs[i]! });
  }
  return out;
}

/**
 * Fold every normalization that can be folded exactly. Edits `model` in place and returns it with the ledger:
 * one entry per normalization (folded, or kept with its reason), node and weight-byte totals; and the scopes the
 * run kept, whose indexes answer for the folded model until it is edited again.
 */
export function foldModel(model: Model, options: FoldOptions = {}): { model: Model; ledger: FoldLedger; rewritten: RewrittenNode[]; scopes: Scope[] } {
  const ctx = makeContext(model, options);
  const nodesBefore = countNodes(model);
  const bytesBefore = weightBytes(model);
  // One set of scopes for the whole run: each graph's index is built once and follows the edits.
  const scopes = buildScopes(model, ctx.labels, ctx.options.inputShapes, editableUseDef);
  ctx.live = new Map(scopes.map((scope) => [scope.graph, { scope, ud: scope.ud as EditableUseDef, released: [], releasedIds: [] }]));
  // Ledger order: where each node stood in the original model (by graph path, then ledger name).
  // (per path a flat table of labels, names.ts, and each label's place: a Map of 10^5 labels costs more to fill)
  const order = new Map<string, { labels: NameTable; at: number[] }>();
  const bound = new Map<string, number>();
  for (const s of scopes) bound.set(s.path, (bound.get(s.path) ?? 0) + s.graph.nodes.length);
  let placed = 0;
  for (const s of scopes) {
    let inPath = order.get(s.path);
    if (!inPath) order.set(s.path, inPath = { labels: nameTable(Math.max(bound.get(s.path)!, 1)), at: [] });
    const { labels, at } = inPath;
    const nodes = s.graph.nodes;
    for (let i = 0; i < nodes.length; i++) {
      const n = nodes[i]!;
      const known = labels.size;
      const id = labels.add(labelOf(s, n));
      // (a name seen again takes the place after the distinct names so far, as one map of both keys would give)
      at[id] = id < known ? placed : placed++;
    }
  }
  const placeOf = (graph: string, label: string): number | undefined => {
    const inPath = order.get(graph);
    const id = inPath ? inPath.labels.id(label) : -1;
    return id < 0 ? undefined : inPath!.at[id];
  };
  const folded: LedgerEntry[] = [];
  // (the names of values gone, as a list: the clean-up needs a set of them only for a graph with value_info; the
  // names each fold released are kept by the index of its graph, see LiveScope)
  const gone: string[] = [];
  const watched: Watched = { nodes: [], graphs: [] };
  for (let pass = 0; pass < MAX_PASSES && sweep(ctx, scopes, folded, gone, watched); pass++) { /* until nothing changes */ }
  if (folded.length) {
    cleanUp(gone, ctx);
    validateModel(model);
  }
  // Every normalization still in the model, with its reason, from the same analysis audit runs.
  // (A norm whose statistics stay shows up again after its tail moved: the folded entry stands.)
  for (const s of scopes) forgetDerived(s);
  // (the set of folded names is made only when some normalization is still there to be checked against it)
  let done: Set<string> | undefined;
  const kept: LedgerEntry[] = findingsOf(ctx, model, scopes).filter((f) => !(done ??= new Set(folded.map((e) => `${e.graph}\u0000${e.node}`))).has(`${f.graph}\u0000${f.node}`))
    .map((f) => ({ ...f, status: 'kept' as const }));
  // each entry's place looked up once (the sort is stable, as before)
  const placedAt = [...folded, ...kept].map((e) => ({ e, at: placeOf(e.graph, e.node) ?? 1e15 }));
  const normalizations = placedAt.sort((a, b) => a.at - b.at).map((x) => x.e);
  // a node a later fold or the clean-up removed is no longer in the model to be watched
  // (worked out when first asked for: only the whole-model check of a proven fold watches them)
  const removed = ctx.removedNodes;
  let rewritten: RewrittenNode[] | undefined;
  return {
    model,
    ledger: { normalizations, nodesBefore, nodesAfter: countNodes(model), bytesBefore, bytesAfter: weightBytes(model) },
    get rewritten() { return rewritten ??= watchedStill(ctx, watched, removed); },
    // the run's scopes, current for the model as returned (until it is edited again)
    scopes,
  };
}
