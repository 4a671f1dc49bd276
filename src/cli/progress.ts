import cliProgress from 'cli-progress';

/** A progress bar on stderr when stderr is a terminal; a no-op otherwise. */
export function progressBar(label: string, unit = 'samples'): { update(done: number, total: number): void; stop(): void } {
  if (!process.stderr.isTTY) return { update() {}, stop() {} };
  const bar = new cliProgress.SingleBar(
    { stream: process.stderr, format: `${label} [{bar}] {percentage}% | {value}/{total} ${unit} | eta {eta}s`, hideCursor: true },
    cliProgress.Presets.shades_classic,
  );
  let started = false;
  return {
    update(done, total) {
      if (!started) {
        bar.start(total, 0);
        started = true;
      }
      bar.update(done);
    },
    stop() {
      if (started) bar.stop();
    },
  };
}
