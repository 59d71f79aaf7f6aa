// Test-side model builder: the generic parts live in models/builder.ts (shared with models/build.ts).
// Models built here are encoded with onnx-proto's own protobuf code, independent of pleat's writer.
import { writeFileSync } from 'node:fs';
import { modelBytes, type GraphBuilder, type ModelOptions } from '../../models/builder.js';

export * from '../../models/builder.js';

export function saveModel(path: string, g: GraphBuilder, o: ModelOptions = {}): string {
  writeFileSync(path, modelBytes(g, o));
  return path;
}
