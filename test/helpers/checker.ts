// The ONNX standard's own reference checker (Debian python3-onnx, run with /usr/bin/python3), full_check=True.
import { execFileSync } from 'node:child_process';
import { existsSync } from 'node:fs';

export const CHECKER_PYTHON = '/usr/bin/python3';

export function checkerAvailable(): boolean {
  if (!existsSync(CHECKER_PYTHON)) return false;
  try { execFileSync(CHECKER_PYTHON, ['-c', 'import onnx'], { stdio: 'ignore' }); return true; } catch { return false; }
}

/** Returns '' when the model passes onnx.checker.check_model(full_check=True), else the checker's message. */
export function onnxCheck(path: string): string {
  try {
    execFileSync(CHECKER_PYTHON, ['-c',
      'import sys, onnx\nonnx.checker.check_model(onnx.load(sys.argv[1]), full_check=True)', path],
    { stdio: ['ignore', 'pipe', 'pipe'] });
    return '';
  } catch (e) {
    const err = e as { stderr?: Buffer; message: string };
    const text = err.stderr?.toString() ?? err.message;
    return text.trim().split('\n').slice(-3).join(' | ') || 'checker failed';
  }
}
