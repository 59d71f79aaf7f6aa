// The command table: names, usage and one-line descriptions, without the command modules themselves. main.ts
// imports only the module of the command being run, so `pleat --help` and usage errors load none of them.
export interface CommandModule {
  builder: (y: import('yargs').Argv) => import('yargs').Argv;
  handler: (argv: never) => Promise<void>;
}

export interface CommandEntry {
  name: string;
  usage: string;
  describe: string;
  load: () => Promise<CommandModule>;
  /**
   * Work started from the raw arguments before yargs and the command's module are loaded, for what the command
   * will surely need; the handler confirms or stops it once the flags are parsed.
   */
  ahead?: (args: readonly string[]) => Promise<void>;
}

/**
 * The word right after the command, when it is no option, is its first model (no option before it can have taken
 * it as its value): read it on the thread pool while the modules load (src/onnx/prefetch.ts).
 */
async function readFirstModelAhead(args: readonly string[]): Promise<void> {
  const first = args[1];
  if (first !== undefined && !first.startsWith('-')) (await import('../../src/onnx/sparse-read.js')).readModelAhead(first);
}

export const COMMANDS: readonly CommandEntry[] = [
  {
    name: 'survey', usage: 'survey <model>',
    describe: 'What a model file holds: IR version, opsets, inputs and outputs, op counts, weight bytes, normalizations',
    load: () => import('./survey.js') as Promise<CommandModule>,
    ahead: readFirstModelAhead,
  },
  {
    name: 'fold', usage: 'fold <models..>',
    describe: 'Fold every normalization it safely can, prove each fold, write the folded model, print the ledger',
    load: () => import('./fold.js') as Promise<CommandModule>,
    // its first model is read ahead, and its digest (recorded in the output) starts on a thread now
    ahead: async (args) => {
      const first = args[1];
      if (first === undefined || first.startsWith('-')) return;
      await readFirstModelAhead(args);
      (await import('../../src/jobs/sha256.js')).startSha256(first);
    },
  },
  {
    name: 'audit', usage: 'audit <models..>',
    describe: 'The fold analysis without writing: every normalization, its status (foldable or kept), reason and hint',
    load: () => import('./audit.js') as Promise<CommandModule>,
    ahead: readFirstModelAhead,
  },
  {
    name: 'compare', usage: 'compare <a> <b>',
    describe: 'Run two models on the same inputs and judge their agreement, output by output, against a gate',
    load: () => import('./compare.js') as Promise<CommandModule>,
  },
  {
    name: 'evaluate', usage: 'evaluate <model>',
    describe: 'Evaluate a model on given or seeded inputs and save each output as DIR/<output>.npy with an index',
    load: () => import('./evaluate.js') as Promise<CommandModule>,
  },
  {
    name: 'export', usage: 'export <model>',
    describe: 'Fold and prove, then write the folded weights for device runtimes (safetensors + JSON manifest, or C source)',
    load: () => import('./export.js') as Promise<CommandModule>,
  },
];

export const commandNames = (): string[] => COMMANDS.map((c) => c.name);
