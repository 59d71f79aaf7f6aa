// Headless Chromium for the HTML report tests: Debian's `chromium` package (installed by .ci/run), driven by
// playwright-core with a fresh profile and nothing that reaches the network on its own.
import { existsSync, mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { chromium, type BrowserContext } from 'playwright-core';

export const CHROMIUM = '/usr/bin/chromium';

/** True when the browser is there; under CI its absence is a failure of the test itself, not a skip. */
export function browserAvailable(): boolean {
  if (existsSync(CHROMIUM)) return true;
  if (process.env.CI === 'true') throw new Error(`${CHROMIUM} is missing: install Debian's chromium package (.ci/run does)`);
  console.warn(`${CHROMIUM} is missing: the HTML report's browser tests are skipped (apt-get install chromium)`);
  return false;
}

/** A browser with a fresh profile folder (removed by close). */
export async function openBrowser(): Promise<{ context: BrowserContext; close: () => Promise<void> }> {
  const profile = mkdtempSync(join(tmpdir(), 'pleat-chromium-'));
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: CHROMIUM,
    headless: true,
    viewport: { width: 1200, height: 900 },
    args: ['--headless', '--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking',
      '--disable-component-update', '--disable-sync'],
  });
  return { context, close: async () => { await context.close(); rmSync(profile, { recursive: true, force: true }); } };
}
