import { readFileSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { WavWriter } from '../../src/io/wav/writer.js';
import { bandLimited, through, white } from '../helpers/signals.js';
import { cli, tmpDir } from '../helpers/tools.js';

// Judging policies (README "Comparing policies"): one threshold for every policy, bursts after
// the initial convergence, clipped signal apart from clipped weights, one quantile function, and
// a real-time factor that is the replay's wall time. tapwarden's own rules, checked as a user
// would read them.

describe('comparison fairness', () => {
  const dir = tmpDir();
  cli(['demo', '--out', dir]);
  const rec = join(dir, 'bench-trial.wav');
  writeFileSync(join(dir, 'lenient.yaml'), 'supervisor:\n  minCancellationDb: -50\n');

  it('judges every policy against the baseline threshold, never its own', () => {
    const out = join(dir, 'cmp');
    const r = cli(['replay', rec, '--policy', join(dir, 'bench-trial.yaml'), '--policy', join(dir, 'lenient.yaml'), '--gate', 'bench-trial', '--out', out]);
    const c = JSON.parse(readFileSync(join(out, 'comparison.json'), 'utf8'));
    const [base, lenient] = c.policies;
    expect(base.judgedAt).toEqual({ minCancellationDb: 6, source: 'gate baseline bench-trial' });
    expect(lenient.judgedAt).toEqual(base.judgedAt);
    // Judged at its own -50 dB it would read 100 % healthy with no burst; at 6 dB it does not.
    expect(lenient.healthyShare).toBeLessThan(1);
    expect(lenient.worstBurst).not.toBeNull();
    expect(r.stdout).toMatch(/judged at  clean-path cancellation >= 6 dB \(from gate baseline bench-trial\) for every policy/);
    // Each summary.json carries the same judgement.
    const s = JSON.parse(readFileSync(join(out, 'lenient', 'summary.json'), 'utf8'));
    expect(s.judgement.minCancellationDb).toBe(6);
  });

  it('the worst burst leaves out the initial convergence, which is reported as time to first handoff', () => {
    const out = join(dir, 'one');
    expect(cli(['replay', rec, '--out', out]).status).toBe(0);
    const s = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    const first = s.judgement.timeToFirstHandoffSeconds;
    expect(first).toBeGreaterThan(0);
    expect(first).toBeLessThan(5);
    // The worst burst is one of the demo's events (the path change at 24 s, the connector glitch
    // at 31 s), not the start.
    expect(s.judgement.worstBurst.startSeconds).toBeGreaterThanOrEqual(first);
    expect(s.judgement.worstBurst.startSeconds).toBeGreaterThan(23);
  });

  it('the text summary and the comparison read the same median (one quantile function)', () => {
    const one = JSON.parse(readFileSync(join(dir, 'one', 'summary.json'), 'utf8'));
    const c = JSON.parse(readFileSync(join(dir, 'cmp', 'comparison.json'), 'utf8'));
    expect(c.policies[0].cleanCancellationMedianDb).toBe(one.cancellation.clean.medianDb);
    // Nearest rank over the windows, to 0.01 dB: check it against the decision log.
    const clean = readFileSync(join(dir, 'one', 'decisions.ndjson'), 'utf8')
      .trim()
      .split('\n')
      .map((l) => JSON.parse(l))
      .filter((l) => l.type === 'decision')
      .map((l) => l.clean.cancellationDb as number)
      .sort((a, b) => a - b);
    expect(Math.abs(one.cancellation.clean.medianDb - clean[Math.ceil(0.5 * clean.length) - 1]!)).toBeLessThanOrEqual(0.005 + 1e-9);
  });

  it('realtimeFactor is the recording seconds per second of the whole replay (wall clock)', () => {
    const out = join(dir, 'timed');
    const t0 = performance.now();
    expect(cli(['replay', rec, '--out', out]).status).toBe(0);
    const wall = (performance.now() - t0) / 1000;
    const s = JSON.parse(readFileSync(join(out, 'summary.json'), 'utf8'));
    expect(s.elapsedSeconds).toBeLessThan(wall);
    expect(s.engineSeconds).toBeLessThan(s.elapsedSeconds);
    expect(s.realtimeFactor).toBeCloseTo(s.durationSeconds / s.elapsedSeconds, 6);
  });
});

describe('clipped signal is not drift', () => {
  it('a q15 policy on a reference that itself clips: signal clips counted, no window refused for saturation, the gate does not count them', () => {
    const dir = tmpDir();
    const rate = 8000;
    const n = 20 * rate;
    // A hot reference (-9 dB RMS): its peaks pass full scale, which a float recorder keeps and
    // a 16-bit input register clips.
    const x = bandLimited(n, 0.03, 0.3, 0.35, 951);
    const d = through(Array.from({ length: 16 }, (_, k) => 0.3 * 0.8 ** k * Math.cos(0.7 * k)), x, white(n, 0.002, 952));
    const f = join(dir, 'clipping.wav');
    const w = new WavWriter(f, rate, 2, 'float32');
    w.write([x, d], n);
    w.close();
    writeFileSync(join(dir, 'float.yaml'), 'filter:\n  taps: 32\n');
    writeFileSync(join(dir, 'fixed.yaml'), 'filter:\n  taps: 32\n  arithmetic: q15\n  leakShift: 14\n');
    const out = join(dir, 'out');
    cli(['replay', f, '--policy', join(dir, 'float.yaml'), '--policy', join(dir, 'fixed.yaml'), '--gate', 'float', '--out', out]);
    const s = JSON.parse(readFileSync(join(out, 'fixed', 'summary.json'), 'utf8'));
    expect(s.saturations.adaptive.signal).toBeGreaterThan(0);
    expect(s.saturations.adaptive.weights).toBe(0);
    expect(s.handoffs.rejectedBy.saturation).toBe(0);
    const c = JSON.parse(readFileSync(join(out, 'comparison.json'), 'utf8'));
    const fixed = c.policies.find((p: { name: string }) => p.name === 'fixed');
    expect(fixed.saturations.signal).toBeGreaterThan(0);
    expect((c.gate.worse['fixed'] as string[]).filter((reason) => /saturation/.test(reason))).toEqual([]);
  });
});
