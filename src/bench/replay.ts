import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { WavWriter } from '../io/wav/writer.js';
import { replay } from '../replay/replay.js';
import { benchConfig, synthetic, type BenchCase } from './engine.js';

/**
 * A replay end to end, as `tapwarden replay` runs it (decode, the run, the decision log, both
 * output WAVs, the spectra and summary), of a synthetic 16-bit recording of the case's length
 * written to a temporary folder first; the same config as the engine-only row. Its real-time
 * factor is the replay's own (the recording's seconds over the replay's wall time).
 */
export function benchReplay(c: BenchCase): { realtimeFactor: number } {
  const dir = mkdtempSync(join(tmpdir(), 'tapwarden-bench-'));
  try {
    const n = Math.round(c.seconds * c.rate);
    const { x, d } = synthetic(n, c.taps);
    const recording = join(dir, 'bench.wav');
    const w = new WavWriter(recording, c.rate, 2, 'pcm16');
    w.write([x, d], n);
    w.close();
    const config = benchConfig(c);
    const judge = { minCancellationDb: config.supervisor.minCancellationDb, source: 'bench' };
    const policies = [{ name: 'bench', config, configFile: 'bench' }];
    // One run to warm the code up (as the engine row's warm-up blocks), one timed.
    replay({ recording, policies, outDir: join(dir, 'warm'), judge });
    const r = replay({ recording, policies, outDir: join(dir, 'out'), judge });
    return { realtimeFactor: r.summaries[0]!.realtimeFactor };
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
}
