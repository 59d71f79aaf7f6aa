// The rule registry: one rule per (layer op, direction). Into the producer is tried first (exact whatever
// the neighbours pad); ConvTranspose has no consumer rule, since its output positions receive different
// numbers of kernel taps and a shift of its input does not become a uniform bias.
import type { Direction } from '../types.js';
import type { FoldRule } from './rule.js';
import { convProducer } from './conv-producer.js';
import { convTransposeProducer } from './conv-transpose-producer.js';
import { gemmProducer } from './gemm-producer.js';
import { matmulProducer } from './matmul-producer.js';
import { convConsumer } from './conv-consumer.js';
import { gemmConsumer } from './gemm-consumer.js';
import { matmulConsumer } from './matmul-consumer.js';

export const RULES: ReadonlyArray<FoldRule<any>> = [
  convProducer, convTransposeProducer, gemmProducer, matmulProducer, convConsumer, gemmConsumer, matmulConsumer,
];

export function ruleFor(op: string, direction: Direction): FoldRule<any> | undefined {
  return RULES.find((r) => r.op === op && r.direction === direction);
}

export type { FoldRule, RuleMatch } from './rule.js';
