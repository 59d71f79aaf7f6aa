// The kernel table survey reads (src/eval/kernel-table.ts, no kernel code) against the registry itself: the same
// (domain, op, first opset) entries, and hasKernel answers as findKernel does for every operator and opset.
import { describe, expect, it } from 'vitest';
import { hasKernel, KERNEL_TABLE } from '../../src/eval/kernel-table.js';
import { findKernel, kernelList } from '../../src/eval/registry.js';

const key = (e: readonly [string, string, number]) => `${e[0]}::${e[1]}::${e[2]}`;

describe('kernel table', () => {
  it('lists exactly the registered kernels', () => {
    expect(KERNEL_TABLE.map(key).sort()).toEqual(kernelList().map(key).sort());
  });

  it('hasKernel agrees with findKernel at every opset, for known and unknown operators', () => {
    const ops = [...new Set(KERNEL_TABLE.map(([d, o]) => `${d}::${o}`)), '::NoSuchOp', 'com.example::Add', 'ai.onnx::Conv'];
    for (const k of ops) {
      const [d, o] = k.split('::') as [string, string];
      for (let opset = 0; opset <= 21; opset++) expect(hasKernel(d, o, opset), `${k} at ${opset}`).toBe(findKernel(d, o, opset) !== undefined);
    }
  });
});
