// Runtime values of the reference evaluator. Floating-point tensors are held in Float64Array (the ground
// truth mode) or Float32Array (deployment arithmetic); integer and bool tensors are always Float64Array,
// which is exact for every shape, index and count a model uses (|v| < 2^53).
import type { DataTypeCode, Graph, Node } from '../graph/ir.js';

export type NumArray = Float64Array | Float32Array;

export interface Value {
  /** ONNX element type the value has in the model (FLOAT, INT64, BOOL, ...). */
  type: DataTypeCode;
  dims: number[];
  data: NumArray;
}

export type Precision = 'float64' | 'float32';

export interface KernelContext {
  node: Node;
  /** Opset version of the node's domain in the model being run. */
  opset: number;
  precision: Precision;
  /** Run a subgraph (If branches) with outer-scope values visible; returns the subgraph's outputs. */
  runSubgraph(graph: Graph, extra?: Map<string, Value>): Value[];
  /**
   * Whether the kernel may overwrite input i's array and return it as its result: true only when no later
   * node, graph output, outer scope or caller can read that array (the evaluator checks its holders).
   */
  reusable?(i: number): boolean;
}

export interface Kernel {
  op: string;
  /** '' is the default ONNX domain. */
  domain: string;
  /** Lowest opset this module implements; the registry picks the module with the highest sinceVersion <= opset. */
  sinceVersion: number;
  run(inputs: Array<Value | undefined>, ctx: KernelContext): Value[];
}
