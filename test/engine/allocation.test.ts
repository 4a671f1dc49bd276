import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';

// DEVELOPERS.md: the hot path allocates nothing. Counted, not timed: the garbage collector's own
// events (PerformanceObserver 'gc' entries, Node.js perf_hooks) while a run processes blocks in
// steady state, in a process of its own (test/helpers/gcProbe.mjs). V8's young generation starts
// at 1 MiB, so 10,000 blocks that allocated even 100 bytes each would be collected.

const PROBE = new URL('../helpers/gcProbe.mjs', import.meta.url).pathname;

function probe(filter: object, blocks: number): { gcs: number } {
  const r = spawnSync(process.execPath, [PROBE, JSON.stringify(filter), String(blocks)], { encoding: 'utf8' });
  expect(r.status, r.stderr).toBe(0);
  return JSON.parse(r.stdout.trim());
}

// The run: the engine (both paths, statistics, supervisor), the forecaster and the fan-out to
// sinks. (Node's fs.writeSync allocates a little per call itself, so file sinks are not counted.)
const cases: Array<[object, number]> = [
  [{ arithmetic: 'float64', algorithm: 'nlms', leak: 1e-4, meanRemovalEvery: 512, noiseInjectionDb: -60 }, 40_000],
  [{ arithmetic: 'float64', algorithm: 'lms', step: 0.01, leakShift: 12 }, 40_000],
  [{ arithmetic: 'float32', algorithm: 'nlms', leak: 1e-4, meanRemovalEvery: 512 }, 10_000],
  [{ arithmetic: 'q15', algorithm: 'lms', step: 0.05, rounding: 'truncate', leakShift: 14, meanRemovalEvery: 512, noiseInjectionDb: -60 }, 10_000],
  [{ arithmetic: 'q31', algorithm: 'nlms', leak: 1e-4, meanRemovalEvery: 512 }, 10_000],
  [{ algorithm: 'pbfdaf', taps: 64, blockSize: 32, constrained: true, leak: 1e-4 }, 20_000],
  [{ algorithm: 'pbfdaf', taps: 64, blockSize: 32, constrained: false }, 20_000],
];

describe('the hot path allocates nothing (no garbage collection in steady state)', () => {
  for (const [filter, blocks] of cases) {
    it(JSON.stringify(filter), () => {
      expect(probe(filter, blocks).gcs).toBe(0);
    });
  }
});
