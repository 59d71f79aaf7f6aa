// Whether an existing side file is pleat's own output for an output path, so a new run may replace it. pleat
// writes OUT.data only together with OUT, and only the bytes OUT's tensors name, back to back. So the file is
// taken as ours when the model now at OUT names no other side file and its tensors' ranges end exactly where
// the file ends. Anything else (no model at OUT, another producer's file, a file with trailing bytes) is not
// ours and is never overwritten.
import { closeSync, statSync } from 'node:fs';
import { basename } from 'node:path';
import { decodeModel } from './read.js';
import { eachTensor, externalRef } from './external.js';
import { openForRead, readSparse } from './sparse-read.js';

export function ownsSideFile(outPath: string, sidePath: string): boolean {
  try {
    const side = statSync(sidePath);
    if (!side.isFile()) return false;
    const fd = openForRead(outPath);
    let bytes: Uint8Array;
    try { bytes = readSparse(outPath, fd); } finally { closeSync(fd); }
    const model = decodeModel(bytes, '.');
    let end = 0, others = false, any = false;
    eachTensor(model.graph, (t) => {
      if (t.storage.kind !== 'external') return;
      const ref = externalRef(t, outPath);
      any = true;
      if (ref.location !== basename(sidePath)) { others = true; return; }
      end = Math.max(end, ref.offset + (ref.length ?? 0));
    });
    return any && !others && end === side.size;
  } catch {
    return false;
  }
}
