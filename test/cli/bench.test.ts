import { describe, expect, it } from 'vitest';
import { cli } from '../helpers/tools.js';

// The bench prints figures; no test asserts a timing (README "Sizing a rig" has the measured table).
describe('tapwarden bench', () => {
  it('--json prints one object with the documented fields, and the C reference beside NLMS float64', () => {
    const seconds = 0.5;
    const t0 = performance.now();
    const r = cli(['bench', '--taps', '64', '--seconds', String(seconds), '--json']);
    const wall = (performance.now() - t0) / 1000;
    expect(r.status).toBe(0);
    const o = JSON.parse(r.stdout);
    expect(o).toMatchObject({ algorithm: 'nlms', taps: 64, arithmetic: 'float64', rate: 48000 });
    // gcc is on every machine this runs on (node-gyp needs it): the C reference ran.
    expect(o.cSamplesPerSecond).toBeGreaterThan(0);
    // Not a timing assertion: a check by this test's own clock that the figures are not
    // inflated. Both programs processed `seconds` of audio inside the command's wall time, so
    // their claimed times, seconds / realtimeFactor, cannot add up to more than that wall time.
    expect(seconds / o.realtimeFactor + seconds / o.cRealtimeFactor).toBeLessThan(wall);
  });

  it('runs the other algorithms and arithmetics', () => {
    for (const args of [['--arithmetic', 'q15'], ['--arithmetic', 'q31'], ['--algorithm', 'pbfdaf', '--taps', '256'], ['--algorithm', 'lms']]) {
      const r = cli(['bench', '--taps', '64', ...args, '--seconds', '0.1', '--json']);
      expect(r.status, args.join(' ')).toBe(0);
      expect(JSON.parse(r.stdout).realtimeFactor).toBeGreaterThan(0);
    }
  });

  it('q15, q31 and float32 (LMS and NLMS, odd tap counts) run beside the C port, checked bit for bit before it is timed', () => {
    for (const [arithmetic, algorithm, taps] of [['q15', 'nlms', '33'], ['q31', 'lms', '17'], ['float32', 'nlms', '31']]) {
      const r = cli(['bench', '--arithmetic', arithmetic!, '--algorithm', algorithm!, '--taps', taps!, '--seconds', '0.2', '--json']);
      expect(r.status, r.stderr).toBe(0);
      const o = JSON.parse(r.stdout);
      // A row whose port differed from tapwarden would carry cSkipped instead of figures.
      expect(o.cSkipped, arithmetic).toBeUndefined();
      expect(o.cSamplesPerSecond).toBeGreaterThan(0);
      expect(o.ratioToC).toBeGreaterThan(0);
    }
  });

  it('--repeat gives medians with their range; --block-size and --constrained choose the pbfdaf form', () => {
    const r = cli(['bench', '--algorithm', 'pbfdaf', '--taps', '512', '--block-size', '64', '--constrained', 'false', '--seconds', '0.1', '--repeat', '3', '--json']);
    expect(r.status, r.stderr).toBe(0);
    const o = JSON.parse(r.stdout);
    expect(o).toMatchObject({ algorithm: 'pbfdaf', blockSize: 64, constrained: false, repeat: 3 });
    const [lo, hi] = o.samplesPerSecondRange;
    expect(lo).toBeLessThanOrEqual(o.samplesPerSecond);
    expect(hi).toBeGreaterThanOrEqual(o.samplesPerSecond);
    for (const [args, message] of [
      [['--block-size', '128'], /--block-size and --constrained are for pbfdaf/],
      [['--algorithm', 'pbfdaf', '--taps', '1024', '--block-size', '100'], /--block-size 100 is not allowed; allowed: a power of two from 16 to 4096 that divides --taps/],
      [['--algorithm', 'pbfdaf', '--constrained', 'maybe'], /--constrained maybe is not allowed; allowed: true, false/],
      [['--repeat', '0'], /--repeat 0 is not allowed; allowed: a positive integer/],
    ] as [string[], RegExp][]) {
      const bad = cli(['bench', ...args]);
      expect(bad.status).toBe(2);
      expect(bad.stderr).toMatch(message);
    }
  });

  it('--channels N runs N dual paths on the core, without the one-channel references', () => {
    const r = cli(['bench', '--taps', '128', '--seconds', '0.2', '--channels', '4', '--json']);
    expect(r.status, r.stderr).toBe(0);
    const four = JSON.parse(r.stdout);
    expect(four).toMatchObject({ channels: 4, cSkipped: 'references run one channel; this row runs several' });
    expect(four.realtimeFactor).toBeGreaterThan(0);
    expect(cli(['bench', '--channels', '0']).stderr).toMatch(/--channels 0 is not allowed; allowed: a positive integer/);
  });

  it('--replay pairs each engine-only run with a replay of the same length and reports the ratio of the pairs', () => {
    const r = cli(['bench', '--taps', '64', '--seconds', '0.5', '--repeat', '2', '--replay', '--json']);
    expect(r.status, r.stderr).toBe(0);
    const row = JSON.parse(r.stdout);
    expect(row.replayRealtimeFactor).toBeGreaterThan(0);
    // The ratio is the median of per-pair ratios: it lies between the two pairs' ratios, so it is
    // positive and finite whatever the machine does (no speed is asserted).
    expect(Number.isFinite(row.ratioEngineToReplay) && row.ratioEngineToReplay > 0).toBe(true);
    expect(cli(['bench', '--replay']).stderr).toMatch(/--replay is for one case on one channel/);
    expect(cli(['bench', '--taps', '64', '--channels', '2', '--replay']).stderr).toMatch(/--replay is for one case on one channel/);
  });

  it('--serve runs the service paced in real time and reads the CPU time the whole process used', () => {
    const r = cli(['bench', '--taps', '64', '--seconds', '2', '--serve', '--json']);
    expect(r.status, r.stderr).toBe(0);
    const row = JSON.parse(r.stdout);
    // /proc/PID/stat is the operating system's own account (proc(5)); no figure is asserted.
    expect(row.serveSkipped).toBeNull();
    expect(row.serveCores).toBeGreaterThan(0);
    expect(row.serveCores).toBeLessThan(2); // two cores: the process cannot have used more
    expect(cli(['bench', '--serve']).stderr).toMatch(/--serve is for one case on one channel/);
  });

  it('bad options: one line naming what is allowed', () => {
    const r = cli(['bench', '--arithmetic', 'q7']);
    expect(r.status).toBe(2);
    expect(r.stderr.trim()).toBe('tapwarden: bench: --arithmetic q7 is not allowed; allowed: float64, float32, q15, q31 [TW_ERR_USAGE]');
    expect(cli(['bench', '--taps=0']).stderr).toMatch(/--taps 0 is not allowed; allowed: a positive integer/);
  });
});
