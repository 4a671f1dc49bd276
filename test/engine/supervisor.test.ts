import { describe, expect, it } from 'vitest';
import { INITIAL_STATE, decide, failedCriteria, type Policy, type PolicyInput } from '../../src/engine/supervisor.js';
import { DualPathEngine } from '../../src/engine/dualPath.js';
import { runEngine, settings } from '../helpers/engine.js';
import { bandLimited, through, white } from '../helpers/signals.js';

// The two-path transfer rule (Ochiai, Araseki & Ogihara, IEEE Trans. Commun. COM-25(6), 1977):
// the foreground takes the background's model only when the background has been the better
// approximation for K consecutive windows. Health criteria beyond it are tapwarden's own.

const policy: Policy = {
  minCancellationDb: 6,
  maxWeightMean: 0.1,
  marginDb: 1,
  passesRequired: 2,
  rollbackAfter: 3,
  minReferencePowerDb: -60,
};

const good: PolicyInput = {
  referencePowerDb: -20,
  adaptiveErrorPowerDb: -50,
  adaptiveCancellationDb: 30,
  cleanErrorPowerDb: -40,
  adaptiveWeightMean: 0.01,
  adaptiveWeightSaturations: 0,
  outOfRangeSamples: 0,
  nonFiniteSamples: 0,
};

describe('the handoff policy (a pure function)', () => {
  it('names each failed criterion', () => {
    expect(failedCriteria(good, policy)).toEqual([]);
    expect(failedCriteria({ ...good, adaptiveCancellationDb: 5.9 }, policy)).toEqual(['cancellation']);
    expect(failedCriteria({ ...good, adaptiveWeightMean: -0.11 }, policy)).toEqual(['weightMean']);
    expect(failedCriteria({ ...good, adaptiveWeightSaturations: 1 }, policy)).toEqual(['saturation']);
    expect(failedCriteria({ ...good, nonFiniteSamples: 2 }, policy)).toEqual(['nonFinite']);
    expect(failedCriteria({ ...good, outOfRangeSamples: 1 }, policy)).toEqual(['outOfRange']);
    expect(failedCriteria({ ...good, adaptiveErrorPowerDb: -40.5 }, policy)).toEqual(['margin']);
    expect(failedCriteria({ ...good, referencePowerDb: -70 }, policy)).toEqual(['referenceLevel']);
    expect(failedCriteria({ ...good, adaptiveCancellationDb: NaN }, policy)).toEqual(['cancellation']);
  });

  it('hands over after K consecutive passes, then starts counting again', () => {
    let state = INITIAL_STATE;
    const outcomes = [];
    for (let i = 0; i < 5; i++) {
      const r = decide(state, good, policy);
      outcomes.push(r.decision.outcome);
      state = r.state;
    }
    expect(outcomes).toEqual(['pending', 'accepted', 'pending', 'accepted', 'pending']);
  });

  it('a failure resets the pass count; margin alone is idle, not rejected', () => {
    let r = decide(INITIAL_STATE, good, policy);
    r = decide(r.state, { ...good, adaptiveErrorPowerDb: -40 }, policy);
    expect(r.decision.outcome).toBe('idle');
    r = decide(r.state, good, policy);
    expect(r.decision.outcome).toBe('pending');
    r = decide(r.state, { ...good, adaptiveWeightSaturations: 3 }, policy);
    expect(r.decision).toMatchObject({ outcome: 'rejected', failed: ['saturation'], failures: 1, rollback: false });
  });

  it('rolls back after rollbackAfter consecutive unhealthy windows', () => {
    const bad = { ...good, adaptiveCancellationDb: 0 };
    let state = INITIAL_STATE;
    const rollbacks = [];
    for (let i = 0; i < 7; i++) {
      const r = decide(state, bad, policy);
      rollbacks.push(r.decision.rollback);
      state = r.state;
    }
    expect(rollbacks).toEqual([false, false, true, false, false, true, false]);
    expect(decide(INITIAL_STATE, bad, { ...policy, rollbackAfter: null }).decision.rollback).toBe(false);
  });

  it('frozen handoffs hold a passing window as pending', () => {
    let r = decide(INITIAL_STATE, good, policy, true);
    r = decide(r.state, good, policy, true);
    expect(r.decision.outcome).toBe('pending');
    expect(r.decision.passes).toBe(2);
    r = decide(r.state, good, policy, false);
    expect(r.decision.outcome).toBe('accepted');
  });
});

describe('the engine through a corrupted desired channel', () => {
  const fs = 8000;
  const n = 8 * fs;
  const x = bandLimited(n, 0.02, 0.35, 0.2, 101);
  const h = Array.from({ length: 12 }, (_, k) => 0.6 * 0.75 ** k * Math.cos(0.8 * k));
  const h2 = h.map((v, k) => (k % 2 ? 1.3 : 0.7) * v);
  // The path changes at 6 s, after the fault: the clean path then needs new weights.
  const v = white(n, 0.001, 102);
  const after6 = through(h2, x, v);
  const d = through(h, x, v).map((val, i) => (i < 6 * fs ? val : after6[i]!));
  const faultStart = 4 * fs + 130; // mid-window
  const faultEnd = 4.6 * fs + 70;
  for (let i = faultStart; i < faultEnd; i++) d[i] = i % 97 === 0 ? NaN : i % 89 === 0 ? Infinity : 0.95 * Math.sin(i * 0.37) * (i % 3 ? 1 : -1);

  const run = runEngine(settings({}, { windowSeconds: 0.1 }, fs), x, d);
  const winStart = (w: { endSample: number }) => w.endSample - 0.1 * fs;
  const touched = run.windows.filter((w) => w.endSample > faultStart && winStart(w) < faultEnd);
  const before = run.windows.filter((w) => w.endSample <= faultStart);
  const after = run.windows.filter((w) => winStart(w) >= faultEnd);

  it('accepts no handoff in any window the fault touches, and names why', () => {
    expect(touched.length).toBeGreaterThanOrEqual(6);
    for (const w of touched) {
      expect(w.decision.outcome).not.toBe('accepted');
      expect(w.decision.failed).toContain('cancellation');
    }
    expect(touched.some((w) => w.decision.failed.includes('nonFinite'))).toBe(true);
  });

  it('keeps the clean path on its pre-fault weights, so its output is clean again the moment the fault ends', () => {
    const lastVersionBefore = before.at(-1)!.cleanVersion;
    expect(touched.every((w) => w.cleanVersion === lastVersionBefore)).toBe(true);
    const cleanBefore = before.at(-1)!.clean.cancellationDb;
    const first = after[0]!;
    expect(cleanBefore).toBeGreaterThan(30);
    expect(Math.abs(first.clean.cancellationDb - cleanBefore)).toBeLessThan(2);
    // ... while the adaptive path was knocked off by the fault.
    expect(first.adaptive.cancellationDb).toBeLessThan(first.clean.cancellationDb - 6);
    // Non-finite input never reaches an output.
    expect(run.clean.every(Number.isFinite)).toBe(true);
    expect(run.adaptive.every(Number.isFinite)).toBe(true);
    expect(run.engine.nonFiniteSamples).toBeGreaterThan(0);
  });

  it('resumes handoffs after the fault', () => {
    expect(before.some((w) => w.decision.outcome === 'accepted')).toBe(true);
    expect(after.some((w) => w.decision.outcome === 'accepted')).toBe(true);
  });
});

describe('handoff crossfade', () => {
  const fs = 8000;
  const n = 4000;
  const x = new Float64Array(n);
  for (let i = 0; i < n; i++) x[i] = 0.5 * Math.sin((2 * Math.PI * 50 * i) / fs + 0.3);
  const d = x.map((v) => 0.8 * v);
  const switchAt = 2032; // the reference is at a crest here

  /** Largest sample-to-sample step of the clean estimate around a forced handoff. */
  function largestStep(crossfadeSeconds: number): number {
    const s = { ...settings({ taps: 4 }, { crossfadeSeconds, windowSeconds: 0.25, passesRequired: 1000 }, fs), outputSignal: 'estimate' as const };
    const engine = new DualPathEngine(s);
    const out = new Float64Array(n);
    const adaptive = new Float64Array(n);
    engine.process(x, d, out, adaptive, switchAt); // the adaptive path learns; the clean path is still silent
    engine.handoff('forced');
    engine.process(x.subarray(switchAt), d.subarray(switchAt), out.subarray(switchAt), adaptive.subarray(switchAt), n - switchAt);
    let max = 0;
    for (let i = switchAt - 5; i < switchAt + 100; i++) max = Math.max(max, Math.abs(out[i]! - out[i - 1]!));
    return max;
  }

  it('swaps weights without a click: the output moves smoothly with a crossfade and jumps without one', () => {
    const sineSlope = (2 * Math.PI * 50 * 0.4) / fs; // the steepest step of the settled output
    expect(largestStep(0.005)).toBeLessThan(3 * sineSlope);
    expect(largestStep(0)).toBeGreaterThan(0.3);
  });
});
