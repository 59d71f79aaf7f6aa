// Maps (domain, op, opset) to a kernel module. Adding an operator: write src/eval/kernels/<op>.ts exporting a
// `Kernel` (or several, one per opset form) and add it to KERNELS below.
import { PleatError } from '../errors.js';
import type { Kernel } from './value.js';

const KERNELS: Kernel[] = [
  // (kernels are registered here, one line each)
];

const byKey = new Map<string, Kernel[]>();
for (const k of KERNELS) {
  const key = `${k.domain}::${k.op}`;
  const list = byKey.get(key) ?? [];
  list.push(k);
  list.sort((a, b) => b.sinceVersion - a.sinceVersion);
  byKey.set(key, list);
}

export function findKernel(domain: string, op: string, opset: number): Kernel | undefined {
  const d = domain === 'ai.onnx' ? '' : domain;
  return byKey.get(`${d}::${op}`)?.find((k) => k.sinceVersion <= opset);
}

export function getKernel(domain: string, op: string, opset: number, nodeName: string): Kernel {
  const k = findKernel(domain, op, opset);
  if (!k) {
    const dom = domain || 'ai.onnx';
    throw new PleatError('unsupported-op', `node '${nodeName}': operator ${dom}.${op} at opset ${opset} is not supported by pleat's evaluator`);
  }
  return k;
}

export function supportedOps(): string[] {
  return [...new Set(KERNELS.map((k) => (k.domain ? `${k.domain}.` : '') + k.op))].sort();
}
