// The default-domain (ai.onnx) opsets pleat knows. Beyond the newest one, operators may have changed meaning
// (an attribute became an input, a new mode) in ways pleat's rules and kernels do not know, and a fold would be
// proven against the wrong semantics: such a model is refused by name instead. The bound is the newest opset of
// the ONNX release the project tests against: onnx 1.12.0 (Debian python3-onnx; its checker and the backend
// conformance cases), whose onnx.defs.onnx_opset_version() is 17.
import type { Model } from './ir.js';
import { PleatError } from '../errors.js';

export const NEWEST_KNOWN_OPSET = 17;

/** Throws a bad-model PleatError naming the opset when the model's ai.onnx opset is not 1..NEWEST_KNOWN_OPSET. */
export function checkOpset(model: Pick<Model, 'opsets'>, label: string): void {
  for (const o of model.opsets) {
    if (o.domain !== '' && o.domain !== 'ai.onnx') continue;
    const v = o.version;
    if (!Number.isInteger(v) || v < 1 || v > NEWEST_KNOWN_OPSET) {
      throw new PleatError('bad-model', `${label}: opset ai.onnx ${v} is not supported (pleat knows ai.onnx opsets 1 to ${NEWEST_KNOWN_OPSET})`);
    }
  }
}
