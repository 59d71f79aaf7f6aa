// ScatterElements, ScatterND and the deprecated Scatter. Outside check: onnxruntime-node (graph optimizations
// off) on seeded random shapes and axes, every reduction of opset 18; without reduction the indices are
// distinct (the standard leaves duplicate targets unspecified there).
import { describe, it } from 'vitest';
import { SEEDS, T, count, randShape, randn, rng, vsOrt, type In } from './ort-compare.js';

/** n distinct positions in [0, len), shuffled, as possibly negative indices. */
function distinct(r: () => number, n: number, len: number): number[] {
  const all = Array.from({ length: len }, (_, i) => i);
  for (let i = len - 1; i > 0; i--) { const j = Math.floor(r() * (i + 1)); [all[i], all[j]] = [all[j]!, all[i]!]; }
  return all.slice(0, n).map((v) => (r() < 0.3 ? v - len : v));
}

function elementsCase(r: () => number, reduced: boolean): { ins: In[]; axis: number } {
  const dims = randShape(r, 1, 3, 4);
  const axis = Math.floor(r() * dims.length);
  const idims = dims.map((d, k) => (k === axis ? 1 + Math.floor(r() * d) : Math.max(1, d - Math.floor(r() * 2))));
  // per line along the axis: distinct targets (no reduction) or any targets (reduction)
  const outer = count(idims.slice(0, axis)), inner = count(idims.slice(axis + 1)), n = idims[axis]!;
  const idx = new Array<number>(count(idims));
  for (let o = 0; o < outer; o++) {
    for (let i = 0; i < inner; i++) {
      const pick = reduced ? Array.from({ length: n }, () => Math.floor(r() * dims[axis]!)) : distinct(r, n, dims[axis]!);
      for (let k = 0; k < n; k++) idx[(o * n + k) * inner + i] = pick[k]!;
    }
  }
  return {
    axis,
    ins: [
      { name: 'x', dims, data: randn(r, count(dims)) },
      { name: 'i', dims: idims, data: idx, type: T.INT64 },
      { name: 'u', dims: idims, data: randn(r, count(idims)) },
    ],
  };
}

describe('ScatterElements and Scatter (outside check: onnxruntime-node)', () => {
  it('no reduction (opsets 9 Scatter, 11, 13), every reduction (opsets 16 and 18)', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const plain = elementsCase(r, false);
      await vsOrt('Scatter', 9, plain.ins, { axis: plain.axis });
      await vsOrt('ScatterElements', 11, plain.ins, { axis: plain.axis });
      await vsOrt('ScatterElements', 13, plain.ins, { axis: plain.axis - plain.ins[0]!.dims.length });
      const red = elementsCase(r, true);
      for (const reduction of ['add', 'mul']) await vsOrt('ScatterElements', 16, red.ins, { axis: red.axis, reduction });
      for (const reduction of ['max', 'min']) await vsOrt('ScatterElements', 18, red.ins, { axis: red.axis, reduction });
    }
  });
});

describe('ScatterND (outside check: onnxruntime-node)', () => {
  it('slices of every depth, no reduction and every reduction', async () => {
    for (const seed of SEEDS) {
      const r = rng(30 + seed);
      const dims = randShape(r, 1, 3, 4);
      const k = 1 + Math.floor(r() * dims.length);
      const cells = count(dims.slice(0, k));
      const rows = 1 + Math.floor(r() * cells);
      for (const reduction of ['none', 'add', 'mul', 'max', 'min']) {
        // distinct rows without reduction, repeated rows with it
        const flat = reduction === 'none' ? distinct(r, rows, cells).map((v) => (v + cells) % cells) : Array.from({ length: rows }, () => Math.floor(r() * cells));
        const idx: number[] = [];
        for (const f of flat) {
          let rem = f;
          const coord = new Array<number>(k);
          for (let j = k - 1; j >= 0; j--) { coord[j] = rem % dims[j]!; rem = Math.floor(rem / dims[j]!); }
          idx.push(...coord.map((c, j) => (r() < 0.3 ? c - dims[j]! : c)));
        }
        const udims = [rows, ...dims.slice(k)];
        const ins: In[] = [
          { name: 'x', dims, data: randn(r, count(dims)) },
          { name: 'i', dims: [rows, k], data: idx, type: T.INT64 },
          { name: 'u', dims: udims, data: randn(r, count(udims)) },
        ];
        if (reduction === 'none') await vsOrt('ScatterND', 11, ins);
        await vsOrt('ScatterND', 18, ins, { reduction });
      }
    }
  });
});
