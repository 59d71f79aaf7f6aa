// External data: tensor bytes kept in side files next to the model (keys location, offset, length).
// Locations are relative to the model's folder; absolute ones and ones that climb out of it are refused.
import { closeSync, fstatSync, openSync, readSync } from 'node:fs';
import { isAbsolute, relative, resolve, sep } from 'node:path';
import type { Graph, Model, Tensor } from '../graph/ir.js';
import { subgraphsOf } from '../graph/ir.js';
import { PleatError } from '../errors.js';

export interface ExternalRef { location: string; offset: number; length?: number }

export function externalRef(t: Tensor, label: string): ExternalRef {
  if (t.storage.kind !== 'external') throw new Error('not an external tensor');
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
  for (const t of g.initializers) visit(t);
  for (const n of g.nodes) {
    for (const a of n.attributes) {
      if (a.value.type === 'TENSOR') visit(a.value.t);
      else if (a.value.type === 'TENSORS') a.value.tensors.forEach(visit);
    }
    for (const sg of subgraphsOf(n)) eachTensor(sg, visit);
  }
}

/** Read every external tensor's bytes into memory (one open file per location). */
export function loadExternalData(model: Model, label: string): void {
  const files = new Map<string, { fd: number; size: number }>();
  try {
    eachTensor(model.graph, (t) => {
      if (t.storage.kind !== 'external') return;
      const ref = externalRef(t, label);
      const path = resolveLocation(model.baseDir, ref.location, label, t.name);
      let file = files.get(path);
      if (!file) {
        let fd: number;
        try {
          fd = openSync(path, 'r');
        } catch {
          throw new PleatError('bad-model', `${label}: tensor '${t.name}' has external data in '${ref.location}', which cannot be opened`);
        }
        file = { fd, size: fstatSync(fd).size };
        files.set(path, file);
      }
      const length = ref.length ?? file.size - ref.offset;
      if (ref.offset > file.size || ref.offset + length > file.size || length < 0) {
        throw new PleatError('bad-model', `${label}: tensor '${t.name}' external data (offset ${ref.offset}, length ${length}) runs past the end of '${ref.location}' (${file.size} bytes)`);
      }
      const bytes = new Uint8Array(length);
      let got = 0;
      while (got < length) {
        const n = readSync(file.fd, bytes, got, length - got, ref.offset + got);
        if (n <= 0) break;
        got += n;
      }
      t.storage = { kind: 'external', entries: t.storage.entries, bytes };
      // Loading is not a change: remember what was loaded so an untouched tensor re-emits its bytes.
      if (t.origin) t.origin.loaded = bytes;
    });
  } finally {
    for (const f of files.values()) closeSync(f.fd);
  }
}

export function externalBytes(model: Model): number {
  let n = 0;
  eachTensor(model.graph, (t) => { if (t.storage.kind === 'external') n += t.storage.bytes.byteLength; });
  return n;
}

export { eachTensor };
