// How a TERM (a cancelled CI job) or Ctrl-C ends a run: exit 143 or 130, nothing renamed in, no temporary left.
// The process ends through process.exit, so the output transaction's exit hook removes what is staged
// (src/jobs/outputs.ts); work running beside the main thread (a batch's worker threads) is stopped first, so that
// nothing is written after that hook has run. A second signal ends the run at once.
const stoppers = new Set<() => Promise<unknown>>();
let cancelling = false;

/** How long a cancelled run waits for its stoppers before it ends anyway. */
const STOP_WAIT_MS = 5000;

/** Have `stop` run (and be waited for) before a cancelled run ends; returns a function that forgets it. */
export function beforeCancel(stop: () => Promise<unknown>): () => void {
  stoppers.add(stop);
  return () => { stoppers.delete(stop); };
}

/** Listen for SIGINT and SIGTERM for the whole run (cli/main.ts). */
export function listenForCancel(): void {
  for (const [sig, code] of [['SIGINT', 130], ['SIGTERM', 143]] as const) {
    process.on(sig, () => {
      if (cancelling) process.exit(code);
      cancelling = true;
      const stopped = Promise.all([...stoppers].map((s) => s().catch(() => undefined)));
      let timer: NodeJS.Timeout | undefined;
      const late = new Promise<void>((res) => { timer = setTimeout(res, STOP_WAIT_MS); });
      void Promise.race([stopped, late]).then(() => { clearTimeout(timer); process.exit(code); });
    });
  }
}

/**
 * Let a TERM or Ctrl-C that came during synchronous work (a fold or export runs without yielding, so the signal
 * waits in the event loop) be handled now, before anything is renamed in: call right before a commit. It returns
 * only when the run is not being cancelled; otherwise the process ends with the signal's exit code meanwhile.
 * (PLEAT_SIGNAL_BEFORE_COMMIT: test hook sending TERM at this point, or INT when its value is SIGINT.)
 */
export async function signalsFirst(): Promise<void> {
  const hook = process.env.PLEAT_SIGNAL_BEFORE_COMMIT;
  if (hook) process.kill(process.pid, hook === 'SIGINT' ? 'SIGINT' : 'SIGTERM');
  await new Promise<void>((res) => setTimeout(() => setImmediate(res), 0)); // (one full turn of the loop: its poll reads signals)
  if (cancelling) await new Promise<never>(() => {});
}
