// pleat's own version, read once from the package.json that ships beside the code (dist/ or the sources).
import { existsSync, readFileSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';

let cached: string | undefined;

/** The version field of pleat's package.json ('unknown' if it cannot be found). */
export function pleatVersion(): string {
  if (cached !== undefined) return cached;
  cached = 'unknown';
  let dir = dirname(fileURLToPath(import.meta.url));
  for (let i = 0; i < 5; i++) {
    const p = join(dir, 'package.json');
    if (existsSync(p)) {
      const pkg = JSON.parse(readFileSync(p, 'utf8')) as { name?: string; version?: string };
      if (pkg.name === 'pleat' && pkg.version) { cached = pkg.version; break; }
    }
    dir = dirname(dir);
  }
  return cached;
}
