// The rooms of src/ and the one direction data flows between them (DEVELOPERS.md, "Layout"): a file may import
// from its own room and from rooms to its left, never from a room to its right. The graph's IR types come first:
// the file room reads bytes into them and writes them back, and the graph room imports nothing from the file
// room. Read from the sources' import lines, so a new arrow the wrong way fails here.
import { readdirSync, readFileSync } from 'node:fs';
import { dirname, join, relative, resolve } from 'node:path';
import { describe, expect, it } from 'vitest';

const SRC = resolve(import.meta.dirname, '..', 'src');
const ORDER = ['errors', 'wasm', 'graph', 'onnx', 'fold', 'eval', 'verify', 'ship', 'jobs', 'report', 'index'];

function filesUnder(dir: string): string[] {
  return readdirSync(dir, { withFileTypes: true }).flatMap((e) =>
    e.isDirectory() ? filesUnder(join(dir, e.name)) : e.name.endsWith('.ts') ? [join(dir, e.name)] : []);
}

/** The room of a file under src/: its first folder, or the file's own name for files at the top. */
function roomOf(file: string): string {
  const first = relative(SRC, file).split(/[\\/]/)[0]!;
  return first.replace(/\.ts$/, '');
}

function importsOf(file: string): string[] {
  const text = readFileSync(file, 'utf8');
  return [...text.matchAll(/(?:from|import)\s*\(?\s*'(\.{1,2}\/[^']+)'/g)].map((m) => resolve(dirname(file), m[1]!));
}

describe('rooms of src/', () => {
  const files = filesUnder(SRC);

  it('every room is known', () => {
    for (const f of files) expect(ORDER, relative(SRC, f)).toContain(roomOf(f));
  });

  it('no room imports a room to its right', () => {
    const wrong: string[] = [];
    for (const f of files) {
      const from = ORDER.indexOf(roomOf(f));
      for (const target of importsOf(f)) {
        if (!target.startsWith(SRC)) { wrong.push(`${relative(SRC, f)} imports outside src/`); continue; }
        const to = ORDER.indexOf(roomOf(target.replace(/\.js$/, '.ts')));
        if (to > from) wrong.push(`${relative(SRC, f)} -> ${relative(SRC, target)}`);
      }
    }
    expect(wrong).toEqual([]);
  });

  it('the graph room imports nothing from the file room, and jobs nothing from report', () => {
    for (const f of files) {
      const room = roomOf(f);
      for (const target of importsOf(f)) {
        const to = roomOf(target.replace(/\.js$/, '.ts'));
        if (room === 'graph') expect(to, relative(SRC, f)).not.toBe('onnx');
        if (room === 'jobs') expect(to, relative(SRC, f)).not.toBe('report');
      }
    }
  });
});
