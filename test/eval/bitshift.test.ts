// BitShift. Outside check: onnxruntime-node (graph optimizations off) on seeded random unsigned integers, shift
// amounts up to the type's width minus one, and broadcasting.
import { describe, it } from 'vitest';
import { SEEDS, T, count, randInt, randShape, rng, vsOrt, bcastShape } from './ort-compare.js';

describe('BitShift (outside check: onnxruntime-node)', () => {
  it('LEFT and RIGHT on uint8 and uint32, broadcast shift amounts', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      for (const [type, bits] of [[T.UINT8, 8], [T.UINT32, 32]] as const) {
        const dims = randShape(r, 1, 3);
        const sdims = bcastShape(r, dims);
        const x = { name: 'x', dims, data: randInt(r, count(dims), 0, 2 ** bits - 1), type };
        const s = { name: 's', dims: sdims, data: randInt(r, count(sdims), 0, bits - 1), type };
        for (const direction of ['LEFT', 'RIGHT']) await vsOrt('BitShift', 11, [x, s], { direction }, [{ name: 'y', type }]);
      }
    }
  });
});
