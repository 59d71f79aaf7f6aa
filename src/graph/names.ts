// Value names to dense integer ids (0, 1, 2, ... in order of first sight), for indexes over graphs of up to
// millions of values. An open-addressing table over typed arrays: filling a JS Map with a few million string
// keys measured 2-3x slower here (V8 in Node 20), and the use-def index of a big graph is mostly this work.

export interface NameTable {
  /** The id of a name, adding it when new. */
  add(name: string): number;
  /** The id of a name, or -1. */
  id(name: string): number;
  /** The name of an id (0 <= id < size). */
  nameOf(id: number): string;
  readonly size: number;
}

/** FNV-1a over UTF-16 code units, with a final mix so the low bits (the slot) depend on every character. */
function hashOf(s: string): number {
  let h = 0x811c9dc5 | 0;
  for (let i = 0; i < s.length; i++) h = Math.imul(h ^ s.charCodeAt(i), 0x01000193);
  h ^= h >>> 16;
  h = Math.imul(h, 0x45d9f3b);
  return h ^ (h >>> 16);
}

/** Slots for `count` names: a power of two, at least twice as many (load factor at most 1/2: short probe runs). */
function slotsFor(count: number): number {
  let n = 16;
  while (n < count * 2) n *= 2;
  return n;
}

/**
 * A table for at most `capacity` distinct names (adding more is a bug in the caller and throws); with `grow`,
 * `capacity` is a first guess and the table doubles when it fills (for callers that can only bound the count
 * loosely: a table sized by every occurrence of every name was several times too big, and its memory resident).
 */
export function nameTable(capacity: number, grow = false): NameTable {
  let slotsLen = slotsFor(capacity);
  let mask = slotsLen - 1;
  // slot i is the pair [2i] = id + 1 (0: empty), [2i + 1] = the name's hash: one memory line per probe (a table
  // of 10^5 names is larger than the processor's cache, so each probe that reads two arrays misses twice)
  let slots = new Int32Array(slotsLen * 2);
  // made at its expected length and filled by index: grown by push from empty, a list of 10^5 names was copied
  // at every growth (some 30-60 ms of a validation of a 10^5-node graph)
  const names: string[] = new Array<string>(capacity);
  let count = 0;
  /** Twice the slots, every name put back by its kept hash (no string is read again). */
  const double = () => {
    const old = slots;
    slotsLen *= 2;
    mask = slotsLen - 1;
    slots = new Int32Array(slotsLen * 2);
    for (let s = 0; s < old.length; s += 2) {
      const k = old[s]!;
      if (k === 0) continue;
      const h = old[s + 1]!;
      let i = h & mask;
      while (slots[2 * i] !== 0) i = (i + 1) & mask;
      slots[2 * i] = k;
      slots[2 * i + 1] = h;
    }
  };
  const find = (name: string, add: boolean): number => {
    const h = hashOf(name);
    for (let i = h & mask; ; i = (i + 1) & mask) {
      const k = slots[2 * i]! - 1;
      if (k < 0) {
        if (!add) return -1;
        if (!grow && count >= capacity) throw new Error('name table over capacity');
        if ((count + 1) * 2 > slotsLen) { double(); return find(name, true); } // (never without grow)
        slots[2 * i] = count + 1;
        slots[2 * i + 1] = h;
        names[count] = name; // (past the expected length, the list grows as by push)
        return count++;
      }
      if (slots[2 * i + 1] === h && names[k] === name) return k;
    }
  };
  return {
    add: (name) => find(name, true),
    id: (name) => find(name, false),
    nameOf: (id) => names[id]!,
    get size() { return count; },
  };
}

/**
 * A test of membership in `names`: a few (up to 8, the usual graph inputs) are compared directly, more go in a
 * set. Asked for each of 10^5 initializer names, the set hashed every one of them.
 */
export function memberOf(names: readonly string[]): (name: string) => boolean {
  if (names.length > 8) {
    const set = new Set(names);
    return (name) => set.has(name);
  }
  return (name) => {
    for (let k = 0; k < names.length; k++) if (names[k] === name) return true;
    return false;
  };
}
