// `npm run demo`: the main job on the bundled demo models, as a user would type it: audit each model, then
// fold it (every fold proven, the whole model compared with the original), writing into a scratch folder,
// with one HTML report per model in its reports/ folder.
import { spawnSync } from 'node:child_process';
import { mkdirSync, mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

const root = join(dirname(fileURLToPath(import.meta.url)), '..', '..');
const cli = join(root, 'dist', 'cli', 'main.js');
const out = mkdtempSync(join(tmpdir(), 'pleat-demo-'));
const reports = join(out, 'reports');
mkdirSync(reports);

const models: Array<{ file: string; flags: string[]; about: string }> = [
  { file: 'tray-sorter.onnx', flags: ['--dim', 'batch=1'], about: 'bakery packing line: tray sorter (residual and depthwise CNN)' },
  { file: 'pump-vibration.onnx', flags: [], about: 'pump bearing vibration monitor (1-D convolutions, norm after the activation in the head)' },
  { file: 'tray-edge.onnx', flags: [], about: 'tray-edge segmenter (transposed convolutions)' },
];

let worst = 0;
function run(args: string[]): void {
  console.log(`\n$ pleat ${args.join(' ')}`);
  const r = spawnSync(process.execPath, [cli, ...args], { cwd: root, stdio: 'inherit' });
  worst = Math.max(worst, r.status ?? 3);
}

for (const m of models) {
  const input = join('models', m.file);
  console.log(`\n=== ${m.about}`);
  run(['audit', input]);
  run(['fold', input, '-o', join(out, m.file.replace('.onnx', '.folded.onnx')), ...m.flags,
    '--report', join(reports, m.file.replace('.onnx', '.html')), '--run-figures']);
}
console.log(`\nFolded models are in ${out}`);
console.log(`HTML reports (open in any browser, offline) are in ${reports}`);
process.exit(worst);
