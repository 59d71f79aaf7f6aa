// External data: tensor bytes kept in side files next to the model (keys location, offset, length).
// Locations are relative to the model's folder; absolute ones and ones that climb out of it are refused.
import { closeSync, constants, fstatSync, openSync, readSync, realpathSync } from 'node:fs';
import { isAbsolute, relative, resolve, sep } from 'node:path';
import type { Graph, Model, Tensor } from '../graph/ir.js';
import { elementCount, externalStorage, hasSubgraphs, storageKind, subgraphsOf } from '../graph/ir.js';
import { bytesPerElement, dataTypeName } from '../graph/tensor.js';
import { PleatError } from '../errors.js';

export interface ExternalRef { location: string; offset: number; length?: number }

export function externalRef(t: Tensor, label: string): ExternalRef {
  if (t.storage.kind !== 'external') throw new PleatError('bad-model', `${label}: tensor '${t.name}' is not stored externally`);
  let location = '', offset = 0, length: number | undefined;
  for (const [k, v] of t.storage.entries) {
    if (k === 'location') location = v;
    else if (k === 'offset' || k === 'length') {
      if (!/^\d+$/.test(v)) throw new PleatError('bad-model', `${label}: tensor '${t.name}' has external data ${k} '${v}', which is not a whole number`);
      if (k === 'offset') offset = Number(v); else length = Number(v);
    }
  }
  if (!location) throw new PleatError('bad-model', `${label}: tensor '${t.name}' is stored externally but names no location`);
  return { location, offset, length };
}

/** Resolve a location against the model folder, refusing absolute paths and paths outside the folder. */
export function resolveLocation(baseDir: string, location: string, label: string, tensor: string): string {
  if (isAbsolute(location) || /^[A-Za-z]:[\\/]/.test(location) || location.startsWith('\\')) {
    throw new PleatError('bad-model', `${label}: tensor '${tensor}' names an absolute external data location '${location}'; locations must be relative to the model's folder`);
  }
  const full = resolve(baseDir, location);
  const rel = relative(resolve(baseDir), full);
  if (rel === '' || rel.startsWith('..' + sep) || rel === '..' || isAbsolute(rel)) {
    throw new PleatError('bad-model', `${label}: tensor '${tensor}' has external data location '${location}' outside the model's folder`);
  }
  return full;
}

function eachTensor(g: Graph, visit: (t: Tensor) => void): void {
  // (indexed loops: this runs once per job over every tensor and node, before the engine optimizes it, where a
  // for-of makes an iterator result per step)
  const inits = g.initializers, nodes = g.nodes;
  for (let i = 0; i < inits.length; i++) visit(inits[i]!);
  for (let j = 0; j < nodes.length; j++) {
    const n = nodes[j]!;
    for (const a of n.attributes) {
      if (a.value.type === 'TENSOR') visit(a.value.t);
      else if (a.value.type === 'TENSORS') a.value.tensors.forEach(visit);
    }
    if (hasSubgraphs(n)) for (const sg of subgraphsOf(n)) eachTensor(sg, visit); // no list made for the many nodes without
  }
}

/**
 * Read every external tensor's bytes into memory (one open file per location). Each location must resolve, after
 * following symlinks, to a regular file inside the model's folder; each tensor reads exactly the bytes its dims
 * need, and no byte of a side file is read twice (many tensors naming one large range would multiply memory).
 * `redirect` maps a location's path to the file to read instead (a staged side file not yet renamed in).
 */
export function loadExternalData(model: Model, label: string, redirect?: ReadonlyMap<string, string>): void {
  const files = new Map<string, { fd: number; size: number; read: number; location: string }>();
  let folder: string | undefined;
  try {
    eachTensor(model.graph, (t) => {
      const ext = externalStorage(t);
      if (!ext) return;
      const ref = externalRef(t, label);
      const named = resolveLocation(model.baseDir, ref.location, label, t.name);
      const path = redirect?.get(named) ?? named;
      let file = files.get(path);
      if (!file) {
        let real: string;
        try {
          real = realpathSync(path);
        } catch {
          throw new PleatError('bad-model', `${label}: tensor '${t.name}' has external data in '${ref.location}', which cannot be opened`);
        }
        folder ??= realpathSync(model.baseDir);
        const rel = relative(folder, real);
        if (rel === '' || rel === '..' || rel.startsWith('..' + sep) || isAbsolute(rel)) {
          throw new PleatError('bad-model', `${label}: tensor '${t.name}' has external data location '${ref.location}', a link to ${real}, outside the model's folder`);
        }
        let fd: number;
        try {
          fd = openSync(path, constants.O_RDONLY | constants.O_NONBLOCK); // a FIFO must be refused, not waited on
        } catch {
          throw new PleatError('bad-model', `${label}: tensor '${t.name}' has external data in '${ref.location}', which cannot be opened`);
        }
        const st = fstatSync(fd);
        if (!st.isFile()) {
          closeSync(fd);
          const what = st.isDirectory() ? 'a folder' : st.isFIFO() ? 'a FIFO' : 'not a regular file';
          throw new PleatError('bad-model', `${label}: tensor '${t.name}' has external data location '${ref.location}', which is ${what}; external data must be a regular file`);
        }
        file = { fd, size: st.size, read: 0, location: ref.location };
        files.set(path, file);
      }
      const bpe = bytesPerElement(t.dataType);
      const need = bpe === undefined ? undefined : elementCount(t.dims) * bpe;
      if (need !== undefined && ref.length !== undefined && ref.length !== need) {
        throw new PleatError('bad-model', `${label}: tensor '${t.name}' declares external data length ${ref.length} but its dims [${t.dims.join(',')}] of ${dataTypeName(t.dataType)} need ${need} bytes`);
      }
      const length = need ?? ref.length ?? file.size - ref.offset;
      if (ref.offset > file.size || ref.offset + length > file.size || length < 0) {
        throw new PleatError('bad-model', `${label}: tensor '${t.name}' external data (offset ${ref.offset}, length ${length}) runs past the end of '${ref.location}' (${file.size} bytes)`);
      }
      file.read += length;
      if (file.read > file.size) {
        throw new PleatError('bad-model', `${label}: tensors read ${file.read} bytes from '${ref.location}', which holds ${file.size}: several tensors (the latest '${t.name}') name the same bytes; give each tensor its own range`);
      }
      const bytes = new Uint8Array(length);
      let got = 0;
      while (got < length) {
        const n = readSync(file.fd, bytes, got, length - got, ref.offset + got);
        if (n <= 0) break;
        got += n;
      }
      t.storage = { kind: 'external', entries: ext.entries, bytes };
      // Loading is not a change: remember what was loaded so an untouched tensor re-emits its bytes.
      // (a new origin given, not the one asked for changed: a tensor read from a file makes one per asking)
      const o = t.origin;
      if (o) t.origin = { ...o, loaded: bytes };
    });
  } finally {
    for (const f of files.values()) closeSync(f.fd);
  }
}

/** The real paths of every side file a model names (for guarding them against being overwritten). */
export function sideFilePaths(model: Model): string[] {
  const out = new Set<string>();
  eachTensor(model.graph, (t) => {
    if (storageKind(t) !== 'external') return;
    const ref = externalRef(t, 'model');
    const p = resolve(model.baseDir, ref.location);
    try { out.add(realpathSync(p)); } catch { out.add(p); }
  });
  return [...out];
}

/**
 * Each distinct `location` value the model's external tensors name, exactly as written, with the file it resolves
 * to in the model's folder (in the order first met; two spellings of one file are two entries).
 */
export function sideFileLocations(model: Model): Array<{ location: string; path: string }> {
  const out = new Map<string, string>();
  eachTensor(model.graph, (t) => {
    if (storageKind(t) !== 'external') return;
    const ref = externalRef(t, 'model');
    if (!out.has(ref.location)) out.set(ref.location, resolveLocation(model.baseDir, ref.location, 'model', t.name));
  });
  return [...out].map(([location, path]) => ({ location, path }));
}

export function externalBytes(model: Model): number {
  let n = 0;
  eachTensor(model.graph, (t) => { n += externalStorage(t)?.bytes.byteLength ?? 0; });
  return n;
}

export { eachTensor };
