// Expected failures are values users read: a typed error with a one-line message naming the file, node or
// flag, and what would fix it. The CLI prints the message and exits 2; anything else is a bug.

export type ErrorKind =
  | 'bad-input' // a file that cannot be read, or flags that do not make sense
  | 'bad-model' // bytes that are not a valid ONNX model, or a graph that breaks the standard's rules
  | 'usage' // a command line that does not parse
  | 'dtype-unsupported' // a tensor type pleat cannot decode or encode
  | 'unsupported-op' // the evaluator has no kernel for an operator or attribute value
  | 'missing-shape'; // a dynamic dimension no flag resolves

export class PleatError extends Error {
  readonly kind: ErrorKind;
  constructor(kind: ErrorKind, message: string) {
    super(message);
    this.name = 'PleatError';
    this.kind = kind;
  }
}

export function isPleatError(e: unknown): e is PleatError {
  return e instanceof PleatError;
}
