// DepthToSpace (DCR and CRD) and SpaceToDepth. Outside check: onnxruntime-node (graph optimizations off) on
// seeded random shapes and block sizes, and the round trip SpaceToDepth(DepthToSpace(x)) = x in DCR mode.
import { describe, expect, it } from 'vitest';
import { GraphBuilder } from '../helpers/build.js';
import { SEEDS, count, randn, rng, vsOrt } from './ort-compare.js';
import { runBoth } from './harness.js';

describe('DepthToSpace and SpaceToDepth (outside check: onnxruntime-node)', () => {
  it('both modes, block sizes 1-3', async () => {
    for (const seed of SEEDS) {
      const r = rng(seed);
      const b = 1 + Math.floor(r() * 3);
      const dims = [1 + Math.floor(r() * 2), b * b * (1 + Math.floor(r() * 3)), 1 + Math.floor(r() * 3), 1 + Math.floor(r() * 3)];
      const x = { name: 'x', dims, data: randn(r, count(dims)) };
      await vsOrt('DepthToSpace', 13, [x], { blocksize: b, mode: 'DCR' });
      await vsOrt('DepthToSpace', 13, [x], { blocksize: b, mode: 'CRD' });
      await vsOrt('DepthToSpace', 1, [x], { blocksize: b });
      const sdims = [dims[0]!, 1 + Math.floor(r() * 3), b * (1 + Math.floor(r() * 3)), b * (1 + Math.floor(r() * 3))];
      await vsOrt('SpaceToDepth', 13, [{ name: 'x', dims: sdims, data: randn(r, count(sdims)) }], { blocksize: b });
    }
  });

  it('SpaceToDepth undoes DepthToSpace (DCR)', async () => {
    const r = rng(9);
    const dims = [1, 8, 3, 2];
    const g = new GraphBuilder();
    g.input('x', dims);
    g.node('DepthToSpace', ['x'], { blocksize: 2 }, { outputs: ['d'] });
    g.node('SpaceToDepth', ['d'], { blocksize: 2 }, { outputs: ['y'] });
    g.output('y');
    const x = randn(r, count(dims));
    const res = await runBoth(g, [{ name: 'x', dims, data: x }], 13);
    expect(Array.from(res.f64.get('y')!.data)).toEqual(Array.from(x));
  });
});
