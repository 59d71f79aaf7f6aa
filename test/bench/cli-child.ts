// Runs pleat's command line in this process and prints its peak memory as the last stdout line, so the bench
// can time a command from process start to exit and read its peak RSS.
// Usage: node cli-child.js <pleat arguments...>
import { fileURLToPath } from 'node:url';
import { dirname, join } from 'node:path';

const main = join(dirname(fileURLToPath(import.meta.url)), '..', '..', 'cli', 'main.js');
process.argv = [process.argv[0]!, main, ...process.argv.slice(2)];
process.on('exit', (code) => {
  process.stdout.write(`\n${JSON.stringify({ exitCode: code, maxRssBytes: process.resourceUsage().maxRSS * 1024 })}\n`);
});
await import(main);
