import type { Argv } from 'yargs';
import { filesRead, loadConfig, nameOrigins, runSettings } from '../config.js';
import { checkDestinations, emit, planReports, runFigures } from '../output.js';
import { checkFlags, configFlags, EPILOGUE, inputFlags, int8Flags, int8Setting, reportFlags, threadsFlag } from '../flags.js';


export function builder(y: Argv) {
  return configFlags(checkFlags(int8Flags(reportFlags(inputFlags(y
    .positional('a', { type: 'string', demandOption: true, describe: 'the reference model (run in float64)' })
    .positional('b', { type: 'string', demandOption: true, describe: 'the candidate model' })
    .option('probes', { type: 'number', describe: 'number of seeded input sets (default 3)' })
    .option('gate', { type: 'string', describe: 'pass condition per output over maxAbs, maxRel, rms, cosine, peak and the budget names (default per data type)' }))))))
    .epilogue(EPILOGUE);
}

interface Flags { a: string; b: string; threads?: number; simulateInt8?: string; int8Granularity?: string; probes?: number; gate?: string; seed?: number; input?: string[]; shape?: string[]; dim?: string[]; json?: boolean; format?: string; report?: string[]; runFigures?: boolean; config?: string; strict?: boolean; saveProbes?: string }

export async function handler(argv: Flags): Promise<void> {
  const plan = planReports(argv);
  const { config, file, path } = loadConfig(argv.config);
  const run = runSettings(config, argv);
  const reads = filesRead(path, run.inputs);
  const threads = threadsFlag(argv.threads);
  // loaded here, not at start-up: the gate's expression library is large, and --help or a usage error needs none of it
  const { setThreads } = await import('../../src/index.js');
  const { compareStaged } = await import('../../src/jobs/compare.js');
  if (threads !== undefined) setThreads(threads);
  const { renderCompare } = await import('../../src/report/render.js');
  const { EXIT } = await import('../../src/report/exit-codes.js');
  await checkDestinations(plan, { inputs: [argv.a, argv.b], reads });
  const started = process.hrtime.bigint();
  // the probe folder (--save-probes) is staged, and renamed in with the reports, after a TERM or Ctrl-C that came
  // during the work has had its turn
  const { report, staged, digests } = compareStaged(argv.a, argv.b, { ...run, simulateInt8: int8Setting(argv), saveProbes: argv.saveProbes, digests: plan.pageDetail, origins: nameOrigins(config, file, argv) });
  const extras = {
    ...digests,
    ...(plan.runFigures ? { run: runFigures(started) } : {}),
  };
  await emit(plan, (format, colour) => renderCompare(report, argv.a, argv.b, format, colour, extras), { inputs: [argv.a, argv.b], reads }, [staged]);
  // skipped is not a failure unless --strict (or "strict" in the config) says so
  process.exitCode = report.status === 'failed' || (report.status === 'skipped' && run.strict) ? EXIT.failed : EXIT.ok;
}
