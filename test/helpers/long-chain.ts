// A model whose audit and fold reports run far past one pipe's buffer: a chain of Conv -> BatchNormalization ->
// Relu blocks, some node names in other scripts (seeded weights; invented data for tests).
import { GraphBuilder, modelBytes, randn, rng, uniform } from './build.js';

export function longChain(blocks: number): Uint8Array {
  const r = rng(5);
  const g = new GraphBuilder();
  g.input('x', [1, 2, 3, 3]).output('y');
  let cur = 'x';
  for (let k = 0; k < blocks; k++) {
    const tag = k % 3 === 0 ? `förderband_Ω_🚚_${k}` : `line_${k}`;
    g.init(`w${k}`, [2, 2, 1, 1], randn(r, 4, 0.5));
    const c = g.node('Conv', [cur, `w${k}`], {}, { name: `conv_${tag}` });
    const p = (n: string, v: Float32Array) => g.init(`${n}${k}`, [2], v);
    const b = g.node('BatchNormalization', [c, p('s', uniform(r, 2, 0.5, 1.5)), p('b', randn(r, 2, 0.2)), p('m', randn(r, 2, 0.3)), p('v', uniform(r, 2, 0.2, 2))], {}, { name: `bn_${tag}` });
    cur = g.node('Relu', [b], {}, { name: `relu_${k}`, outputs: k === blocks - 1 ? ['y'] : undefined });
  }
  return modelBytes(g);
}
