import { Matrix, solve } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { FdafAdaptiveKernel } from '../../src/dsp/fdaf.js';
import { loadConfig } from '../../src/config/load.js';
import { DualPathEngine } from '../../src/engine/dualPath.js';
import { settings } from '../helpers/engine.js';
import { correlations, distance, norm, spec, through, white, bandLimited } from '../helpers/signals.js';

// PBFDAF: Soo & Pang, IEEE Trans. ASSP 38(2), 1990; Shynk, IEEE SP Magazine 9(1), 1992. With a
// uniform step (no per-bin normalization) the constrained form equals time-domain block LMS
// (Ferrara 1980; Clark, Mitra & Parker 1981, recalled from memory as docs/REFERENCES.md says):
// w += mu sum over the block of e(n) x(n), with e(n) computed from the weights held through the
// block. With the per-bin step it is not (a test below shows it).

function blockLms(x: Float64Array, d: Float64Array, L: number, N: number, mu: number) {
  const w = new Float64Array(L);
  const y = new Float64Array(x.length);
  const e = new Float64Array(x.length);
  const xs = (n: number) => (n >= 0 ? x[n]! : 0);
  for (let b = 0; b + N <= x.length; b += N) {
    const grad = new Float64Array(L);
    for (let n = b; n < b + N; n++) {
      let acc = 0;
      for (let k = 0; k < L; k++) acc += w[k]! * xs(n - k);
      y[n] = acc;
      e[n] = d[n]! - acc;
      for (let k = 0; k < L; k++) grad[k]! += e[n]! * xs(n - k);
    }
    for (let k = 0; k < L; k++) w[k]! += mu * grad[k]!;
  }
  return { w, y, e };
}

describe('partitioned-block frequency-domain adaptive filter', () => {
  const L = 64;
  const N = 16;
  const n = 4000;
  const x = bandLimited(n, 0.02, 0.4, 0.3, 401);
  const h = Array.from({ length: L }, (_, k) => 0.5 * 0.93 ** k * Math.cos(0.4 * k));
  const d = through(h, x, white(n, 0.01, 402));

  function fdaf(constrained: boolean, normalized: boolean, mu: number) {
    const k = new FdafAdaptiveKernel(spec({ algorithm: 'pbfdaf', taps: L, step: mu, delta: 1e-6 }), { blockSize: N, constrained, normalized });
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    for (let i = 0; i < n; i += 37) k.run(x, d, null, y, e, i, Math.min(n, i + 37)); // ragged calls
    return { k, y, e };
  }

  it('constrained: matches time-domain block LMS to 1e-9 (outputs one block late)', () => {
    const mu = 0.002;
    const ref = blockLms(x, d, L, N, mu);
    const got = fdaf(true, false, mu);
    const whole = Math.floor(n / N) * N;
    let worst = 0;
    for (let i = N; i < whole; i++) worst = Math.max(worst, Math.abs(got.y[i]! - ref.y[i - N]!), Math.abs(got.e[i]! - ref.e[i - N]!));
    expect(worst).toBeLessThan(1e-9);
    expect(distance(got.k.getWeights(), ref.w)).toBeLessThan(1e-9 * norm(ref.w));
    expect(norm(ref.w)).toBeGreaterThan(0.5); // it did learn something
  });

  it('unconstrained: does not match block LMS exactly (its partitions wrap)', () => {
    const mu = 0.002;
    const ref = blockLms(x, d, L, N, mu);
    const got = fdaf(false, false, mu);
    expect(distance(got.k.getWeights(), ref.w)).toBeGreaterThan(1e-4);
  });

  for (const constrained of [true, false]) {
    const claim = constrained ? 'converges to the Wiener solution R^-1 p (ml-matrix solve)' : 'converges near it and cancels to the noise floor (it is biased: its partitions wrap)';
    it(`normalized, ${constrained ? 'constrained' : 'unconstrained'}: ${claim}`, () => {
      // A coloured but full-rank input (AR(1), a = 0.6), so that R^-1 p is well defined.
      const long = 60_000;
      const xl = white(long, 0.3, 403);
      for (let i = 1; i < long; i++) xl[i]! += 0.6 * xl[i - 1]!;
      const dl = through(h, xl, white(long, 0.01, 404));
      const k = new FdafAdaptiveKernel(spec({ algorithm: 'pbfdaf', taps: L, step: 0.3, delta: 1e-6 }), { blockSize: N, constrained });
      const y = new Float64Array(long);
      const e = new Float64Array(long);
      const mean = new Float64Array(L);
      let count = 0;
      for (let i = 0; i < long; i += 256) {
        k.run(xl, dl, null, y, e, i, Math.min(long, i + 256));
        if (i >= long / 2) {
          k.getWeights().forEach((v, j) => (mean[j]! += v));
          count++;
        }
      }
      for (let j = 0; j < L; j++) mean[j]! /= count;
      const { R, p } = correlations(xl, dl, L, long / 2, long);
      const wiener = solve(new Matrix(R), Matrix.columnVector(p)).to1DArray();
      expect(distance(mean, wiener) / norm(wiener)).toBeLessThan(constrained ? 0.03 : 0.15);
      let mse = 0;
      for (let i = (3 * long) / 4; i < long; i++) mse += e[i]! ** 2;
      expect(mse / (long / 4)).toBeLessThan(2 * 0.01 ** 2);
    });
  }
});

/** References of every kind a rig produces, at -20 dB. */
function reference(kind: string, n: number, seed: number): Float64Array {
  const x = white(n, 1, seed);
  if (kind === 'band') return bandLimited(n, 0.03, 0.3, 0.1, seed);
  if (kind === 'ar') for (let i = 1; i < n; i++) x[i]! += 0.95 * x[i - 1]!;
  if (kind === 'narrow') return bandLimited(n, 0.1, 0.12, 0.1, seed);
  if (kind === 'tones') for (let i = 0; i < n; i++) x[i] = Math.sin(0.3 * i) + 0.5 * Math.sin(1.1 * i + 1) + 0.01 * x[i]!;
  let s = 0;
  for (const v of x) s += v * v;
  const g = 0.1 / Math.sqrt(s / n);
  return x.map((v) => v * g);
}

function cancellation(L: number, N: number, constrained: boolean, step: number, kind: string) {
  const n = 100_000;
  const x = reference(kind, n, 41);
  const d = through(Array.from({ length: Math.min(L, 48) }, (_, k) => 0.5 * 0.9 ** k * Math.cos(0.5 * k)), x, white(n, 1e-4, 42));
  const k = new FdafAdaptiveKernel(spec({ algorithm: 'pbfdaf', taps: L, step, delta: 1e-6, weightLimit: 1000 }), { blockSize: N, constrained });
  const y = new Float64Array(n);
  const e = new Float64Array(n);
  k.run(x, d, null, y, e, 0, n);
  let pe = 0;
  let pd = 0;
  for (let i = n - 10_000; i < n; i++) {
    pe += e[i]! ** 2;
    pd += d[i]! ** 2;
  }
  return { db: 10 * Math.log10(pd / pe), finite: y.every(Number.isFinite) && e.every(Number.isFinite), k };
}

describe('pbfdaf stability bound: step < 1 for both forms (measured; README "pbfdaf")', () => {
  // Partitions P = 1, 4 and 16; white, band-limited, AR(1) 0.95, narrowband and two-tone
  // references. The bound is measured, not derived: per-bin normalization with the gradient
  // constraint has no closed-form bound tapwarden relies on.
  const forms: Array<[number, number]> = [
    [64, 64],
    [256, 64],
    [1024, 64],
  ];
  for (const [L, N] of forms) {
    for (const constrained of [true, false]) {
      it(`L ${L}, N ${N} (P ${L / N}), ${constrained ? 'constrained' : 'unconstrained'}: converges at step 0.99 on every reference`, () => {
        for (const kind of ['white', 'band', 'ar', 'narrow', 'tones']) {
          const r = cancellation(L, N, constrained, 0.99, kind);
          expect(r.finite, kind).toBe(true);
          expect(r.db, kind).toBeGreaterThan(20);
        }
      });
    }
  }

  it('the bound is close: unconstrained diverges at 1.2 with partitions (at 1.5 with one), into the weight limit, outputs still finite', () => {
    for (const [L, N, step] of [
      [256, 64, 1.2],
      [1024, 64, 1.2],
      [64, 16, 1.2],
      [64, 64, 1.5],
    ] as const) {
      const r = cancellation(L, N, false, step, 'white');
      expect(r.db).toBeLessThan(0);
      expect(r.finite).toBe(true);
      expect(r.k.weightSaturations).toBeGreaterThan(0);
      expect(Math.max(...r.k.getWeights().map(Math.abs))).toBeLessThanOrEqual(1000 + 1e-9);
    }
  });

  it('the config refuses step >= 1', () => {
    expect(() => loadConfig(undefined, { filter: { algorithm: 'pbfdaf', taps: 256, blockSize: 64, step: 1 } })).toThrow(/filter.step = 1 is not allowed with algorithm pbfdaf; allowed: 0 < step < 1/);
    expect(() => loadConfig(undefined, { filter: { algorithm: 'pbfdaf', taps: 256, blockSize: 64, step: 0.99 } })).not.toThrow();
  });
});

describe('pbfdaf weight limit and handoff', () => {
  it('enforces filter.weightLimit: a diverging filter clips its taps, counts them, and its output stays finite', () => {
    const n = 40_000;
    const x = reference('white', n, 43);
    const d = through([0.9, -0.5], x);
    const k = new FdafAdaptiveKernel(spec({ algorithm: 'pbfdaf', taps: 64, step: 1.6, delta: 1e-6, weightLimit: 2 }), { blockSize: 64, constrained: false });
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    k.run(x, d, null, y, e, 0, n);
    expect(k.weightSaturations).toBeGreaterThan(0);
    expect(Math.max(...k.getWeights().map(Math.abs))).toBeLessThanOrEqual(2 + 1e-9);
    expect(y.every(Number.isFinite) && e.every(Number.isFinite)).toBe(true);
  });

  for (const constrained of [true, false]) {
    it(`${constrained ? 'constrained' : 'unconstrained'}: after a handoff the clean path outputs exactly what the adaptive path does`, () => {
      const n = 60_000;
      const x = reference('band', n, 44);
      const d = through(Array.from({ length: 40 }, (_, k) => 0.5 * 0.9 ** k * Math.cos(0.5 * k)), x, white(n, 1e-4, 45));
      const s = settings({ algorithm: 'pbfdaf', taps: 128, blockSize: 32, constrained, step: 0.5 }, { passesRequired: 1_000_000, crossfadeSeconds: 0 });
      const engine = new DualPathEngine(s);
      const clean = new Float64Array(n);
      const adaptive = new Float64Array(n);
      const half = n / 2;
      engine.process(x, d, clean, adaptive, half);
      engine.adapting = false;
      engine.handoff('forced');
      engine.process(x.subarray(half), d.subarray(half), clean.subarray(half), adaptive.subarray(half), half);
      // One block of latency after the handoff, then the two paths are the same filter.
      for (let i = half + 64; i < n; i++) expect(clean[i]).toBe(adaptive[i]);
      let pe = 0;
      let pd = 0;
      for (let i = half + 64; i < n; i++) {
        pe += clean[i]! ** 2;
        pd += d[i]! ** 2;
      }
      expect(10 * Math.log10(pd / pe)).toBeGreaterThan(30);
    });
  }
});

describe('what the normalized constrained form is', () => {
  it('is not block LMS: the per-bin step reshapes the gradient (README says what it is)', () => {
    const L = 64;
    const N = 16;
    const n = 4000;
    const x = bandLimited(n, 0.02, 0.4, 0.3, 411);
    const d = through(Array.from({ length: L }, (_, k) => 0.5 * 0.93 ** k * Math.cos(0.4 * k)), x, white(n, 0.01, 412));
    const k = new FdafAdaptiveKernel(spec({ algorithm: 'pbfdaf', taps: L, step: 0.3, delta: 1e-6 }), { blockSize: N, constrained: true });
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    k.run(x, d, null, y, e, 0, n);
    // Block LMS with the step that makes the first block's update the same size on average.
    const ref = blockLms(x, d, L, N, 0.3 / ((L / 2) * 0.09));
    expect(distance(k.getWeights(), ref.w)).toBeGreaterThan(1e-3 * norm(ref.w));
  });
});
