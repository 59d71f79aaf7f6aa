// The README's CI recipe on a clean machine: pack pleat, install the tarball into another project with only
// its runtime dependencies (from the npm cache when it has them), and run `npx pleat`. Also: npm reads the
// project's own config without a warning (no unknown .npmrc key).
import { describe, expect, it } from 'vitest';
import { spawnSync } from 'node:child_process';
import { existsSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { ROOT } from './helpers/cli.js';

const npm = (args: string[], cwd: string) => spawnSync('npm', args, {
  cwd, encoding: 'utf8', env: { ...process.env, npm_config_update_notifier: 'false', ONNXRUNTIME_NODE_INSTALL: 'skip' },
});

describe('packaging', () => {
  it('npm reads the project config without warnings (no unknown .npmrc key)', () => {
    const r = npm(['config', 'list'], ROOT);
    expect(r.status).toBe(0);
    expect(r.stderr).not.toMatch(/Unknown (project|user|env) config/i);
  });

  it('a packed tarball installs with runtime dependencies only and `npx pleat survey` runs', () => {
    const pkg = JSON.parse(readFileSync(join(ROOT, 'package.json'), 'utf8')) as { version: string; dependencies: Record<string, string>; devDependencies: Record<string, string> };
    const dest = mkdtempSync(join(tmpdir(), 'pleat-pack-'));
    // dist/ is built by `npm test` already; --ignore-scripts keeps pack from rebuilding it under running tests
    const packed = npm(['pack', '--ignore-scripts', '--pack-destination', dest], ROOT);
    expect(packed.status, packed.stderr).toBe(0);
    expect(packed.stderr).not.toMatch(/Unknown project config/);
    const tgz = join(dest, `pleat-${pkg.version}.tgz`);
    expect(existsSync(tgz)).toBe(true);

    const project = join(dest, 'consumer');
    spawnSync('mkdir', [project]);
    writeFileSync(join(project, 'package.json'), JSON.stringify({ name: 'consumer', version: '1.0.0', private: true }));
    const installed = npm(['install', '--prefer-offline', '--no-audit', '--no-fund', tgz], project);
    expect(installed.status, installed.stderr).toBe(0);
    // scoped packages live one folder down (node_modules/@scope/name)
    const has = (name: string) => existsSync(join(project, 'node_modules', ...name.split('/'), 'package.json'));
    for (const dep of Object.keys(pkg.dependencies)) expect(has(dep), `${dep} is a dependency`).toBe(true);
    for (const dev of Object.keys(pkg.devDependencies)) expect(has(dev), `${dev} is a devDependency`).toBe(false);

    const run = spawnSync('npx', ['--no', 'pleat', 'survey', join(ROOT, 'models', 'tray-edge.onnx'), '--json'], { cwd: project, encoding: 'utf8' });
    expect(run.status, run.stderr).toBe(0);
    const report = JSON.parse(run.stdout) as { nodes?: unknown; opsets?: unknown };
    expect(report).toHaveProperty('opsets');
    const help = spawnSync('npx', ['--no', '--', 'pleat', '--help'], { cwd: project, encoding: 'utf8' });
    expect(help.status).toBe(0);
    expect(help.stdout).toContain('pleat fold <models..>');
  });
});
