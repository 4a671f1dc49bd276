import { spawnSync } from 'node:child_process';
import { describe, expect, it } from 'vitest';
import { CorrelationAccumulator, autocorrelation, autocorrelationFft, stretchCovariance, toeplitzLambdaMax, type Correlations } from '../../src/analysis/correlation.js';
import { analyzeExcitation, quietBands } from '../../src/analysis/excitation.js';
import { DriftForecaster, trend } from '../../src/analysis/forecast.js';
import { DbHistogram } from '../../src/analysis/histogram.js';
import { WelchPsd } from '../../src/analysis/welch.js';
import { EigenvalueDecomposition, Matrix, solve } from 'ml-matrix';
import { bandLimited, correlations, through, white } from '../helpers/signals.js';

/** R and p by the test's own direct sums (helpers/signals.ts), in the analysis's form. */
function direct(x: Float64Array, d: Float64Array | null, L: number): Correlations {
  const { R, p } = correlations(x, d ?? x, L, 0, x.length);
  let pd = 0;
  if (d) for (const v of d) pd += v * v;
  return { r: Float64Array.from(R[0]!), p: Float64Array.from(p), pd: pd / x.length, n: x.length };
}

const analyze = (o: { x: Float64Array; d: Float64Array | null; taps: number; thresholdDb: number }) =>
  analyzeExcitation({
    correlations: direct(o.x, o.d, o.taps),
    withDesired: o.d !== null,
    taps: o.taps,
    leak: 0,
    algorithm: 'lms',
    leakScale: 1,
    thresholdDb: o.thresholdDb,
    maxLossDb: 0.5,
    frequencies: [0, 1],
    psd: [1, 1],
  });

const fs = 8000;

describe('Welch power spectral density against analytic values', () => {
  it('white noise of variance s^2 has the flat one-sided density 2 s^2 / fs', () => {
    const sigma = 0.1;
    const w = new WelchPsd(512, fs);
    w.push(white(fs * 20, sigma, 501));
    const { psd } = w.result();
    const inner = Array.from(psd.subarray(1, -1));
    const mean = inner.reduce((a, b) => a + b, 0) / inner.length;
    expect(mean / ((2 * sigma ** 2) / fs)).toBeCloseTo(1, 1);
    expect(Math.abs(mean / ((2 * sigma ** 2) / fs) - 1)).toBeLessThan(0.03);
  });

  it("a sinusoid's peak sits at its frequency and integrates to its power A^2/2 (Parseval)", () => {
    const A = 0.5;
    const f0 = 1234.5;
    const x = Float64Array.from({ length: fs * 10 }, (_, i) => A * Math.sin((2 * Math.PI * f0 * i) / fs));
    const w = new WelchPsd(1024, fs);
    w.push(x);
    const { frequencies, psd } = w.result();
    let peak = 0;
    for (let k = 1; k < psd.length; k++) if (psd[k]! > psd[peak]!) peak = k;
    expect(Math.abs(frequencies[peak]! - f0)).toBeLessThanOrEqual(fs / 1024);
    let power = 0;
    for (let k = 0; k < psd.length; k++) if (Math.abs(frequencies[k]! - f0) < 100) power += psd[k]! * (fs / 1024);
    expect(power / (A * A / 2)).toBeCloseTo(1, 2);
  });
});

describe('eigenvalues of the autocorrelation matrix against analytic values', () => {
  const L = 32;

  it('white noise: every eigenvalue near the variance (R = s^2 I)', () => {
    const a = analyze({ x: white(200_000, 0.3, 502), d: null, taps: L, thresholdDb: -60 });
    for (const l of a.eigenvalues) expect(Math.abs(l / 0.09 - 1)).toBeLessThan(0.05);
    expect(a.unexcitedDirections).toBe(0);
  });

  it('a sinusoid: rank two, lambda = (A^2 / 4)(L +- |sin(L w) / sin(w)|), the rest unexcited', () => {
    const A = 0.5;
    const w = (2 * Math.PI * 1100) / fs;
    const x = Float64Array.from({ length: 400_000 }, (_, i) => A * Math.cos(w * i + 0.3));
    // The biased estimate r[k] (1/N sum) tapers by (1 - k/N), so the other 30 eigenvalues are small
    // (about -45 dB re lambda_max here) rather than zero: count them against -30 dB.
    const a = analyze({ x, d: null, taps: L, thresholdDb: -30 });
    const r = Math.abs(Math.sin(L * w) / Math.sin(w));
    expect(a.eigenvalues[0]! / ((A * A * (L + r)) / 4)).toBeCloseTo(1, 2);
    expect(a.eigenvalues[1]! / ((A * A * (L - r)) / 4)).toBeCloseTo(1, 2);
    expect(a.unexcitedDirections).toBe(L - 2);
    expect(a.stepBounds.lms).toBeCloseTo(2 / a.eigenvalues[0]!, 10);
  });

  it("with a desired channel: each leak's predicted cancellation is what the leaky Wiener filter really achieves", () => {
    const n = 100_000;
    const x = white(n, 0.3, 503);
    for (let i = 1; i < n; i++) x[i]! += 0.95 * x[i - 1]!; // strongly coloured
    const d = through([0.5, -0.25, 0.1], x, white(n, 0.05, 504));
    const L = 8;
    const a = analyze({ x, d, taps: L, thresholdDb: -60 });
    const c = a.leak!.candidates;
    // Outside check: w = (R + gamma I)^-1 p by ml-matrix's solve, run over the data as an FIR.
    const { R, p } = correlations(x, d, L, 0, n);
    for (const k of [c[0]!, c[3]!, c.at(-1)!]) {
      const w = solve(new Matrix(R).add(Matrix.eye(L).mul(k.leak)), Matrix.columnVector(p)).to1DArray();
      let pe = 0;
      let pd = 0;
      for (let i = 0; i < n; i++) {
        let y = 0;
        for (let j = 0; j < L && j <= i; j++) y += w[j]! * x[i - j]!;
        pe += (d[i]! - y) ** 2;
        pd += d[i]! ** 2;
      }
      expect(k.cancellationDb).toBeCloseTo(10 * Math.log10(pd / pe), 1);
    }
    // The largest leak costs cancellation; the suggestion is the largest that costs at most 0.5 dB.
    expect(c[0]!.lossDb).toBeGreaterThan(0.5);
    expect(a.leak!.suggested).not.toBeNull();
    expect(c.find((k) => k.leak === a.leak!.suggested)!.lossDb).toBeLessThanOrEqual(0.5);
    // Bias grows with the leak (the leak is a bias: Haykin, NNLM 3rd ed., problem 3.4).
    for (let i = 1; i < c.length; i++) expect(c[i]!.relativeBias).toBeLessThanOrEqual(c[i - 1]!.relativeBias + 1e-12);
  });

  it('quiet bands are the contiguous runs below the threshold', () => {
    const f = [0, 100, 200, 300, 400, 500, 600, 700];
    const p = [1e-9, 1e-9, 1, 1, 1e-8, 1e-9, 1e-9, 1];
    expect(quietBands(f, p, -60)).toEqual([
      { loHz: 0, hiHz: 100 },
      { loHz: 400, hiHz: 600 },
    ]);
  });
});

describe('drift forecast arithmetic (least squares, per tap)', () => {
  it('fits a line by least squares', () => {
    const { slope, last } = trend([0, 1, 2, 3], [1, 3, 5, 7]);
    expect(slope).toBeCloseTo(2, 12);
    expect(last).toBeCloseTo(7, 12);
  });

  it("forecasts from each tap's own trend: the tap that reaches the limit first, whatever the mean does", () => {
    // Two taps drift in opposite directions at different rates: the mean moves slowly, tap 1
    // reaches -1 first. Values carry a little scatter so the slopes have a standard error.
    const f = new DriftForecaster(3, 0.5);
    for (let i = 0; i <= 200; i++) {
      const t = 0.5 * i;
      const wiggle = 1e-4 * Math.sin(1.7 * i);
      f.push(t, [0.2 + 0.001 * t + wiggle, -0.3 - 0.004 * t - wiggle, 0.1 + wiggle]);
    }
    const r = f.forecast(1, 10);
    // At t = 100 s tap 1 is at -0.7 moving at -0.004/s: 75 s to -1. Tap 0 needs 700 s.
    expect(r.limitTap).toBe(1);
    expect(r.limitEtaSeconds!).toBeCloseTo(75, 0);
    expect(r.limitEtaLowSeconds!).toBeLessThanOrEqual(r.limitEtaSeconds!);
    expect(r.limitEtaHighSeconds!).toBeGreaterThanOrEqual(r.limitEtaSeconds!);
  });

  it('makes no forecast from scatter, nor one reaching past 10 times its history', () => {
    const flat = new DriftForecaster(2, 0.5);
    for (let i = 0; i < 100; i++) flat.push(0.5 * i, [0.3 + 0.01 * Math.sin(i), -0.2 + 0.01 * Math.cos(3 * i)]);
    expect(flat.forecast(1, 0.2).limitEtaSeconds).toBeNull();
    const slow = new DriftForecaster(1, 0.5);
    for (let i = 0; i < 40; i++) slow.push(0.5 * i, [1e-4 * i + 1e-6 * Math.sin(i)]);
    // 5e-5/s over ~20 s of history: 1 would take hours, far beyond what a line over 20 s says.
    expect(slow.forecast(1, 1).limitEtaSeconds).toBeNull();
  });
});

describe('correlation estimates against direct sums', () => {
  const x = bandLimited(30_000, 0.05, 0.3, 0.2, 511);
  const d = through([0.4, -0.2, 0.1], x, white(30_000, 0.01, 512));

  it('autocorrelation by FFT equals the direct biased sum (to 1e-12 of r[0])', () => {
    const a = autocorrelation(x, 300);
    const b = autocorrelationFft(x, 300);
    for (let k = 0; k < 300; k++) expect(Math.abs(a[k]! - b[k]!)).toBeLessThan(1e-12 * a[0]!);
  });

  it('the streaming accumulator equals direct sums over only the kept samples', () => {
    const L = 100;
    const acc = new CorrelationAccumulator(L, 1024);
    // Keep [0, 5000) and [12000, 30000); samples before a kept stretch still feed x[i-k].
    const keep = (i: number) => i < 5000 || i >= 12000;
    for (let i = 0; i < x.length; i += 700) {
      const end = Math.min(x.length, i + 700);
      for (let j = i; j < end; ) {
        let k = j;
        while (k < end && keep(k) === keep(j)) k++;
        acc.push(x.subarray(j, k), d.subarray(j, k), k - j, keep(j));
        j = k;
      }
    }
    const got = acc.result();
    const r = new Float64Array(L);
    const p = new Float64Array(L);
    let n = 0;
    for (let i = 0; i < x.length; i++) {
      if (!keep(i)) continue;
      n++;
      for (let k = 0; k < L && k <= i; k++) {
        r[k]! += x[i]! * x[i - k]!;
        p[k]! += d[i]! * x[i - k]!;
      }
    }
    expect(got.n).toBe(n);
    for (let k = 0; k < L; k++) {
      expect(Math.abs(got.r[k]! - r[k]! / n)).toBeLessThan(1e-12);
      expect(Math.abs(got.p[k]! - p[k]! / n)).toBeLessThan(1e-12);
    }
  });

  it("Lanczos finds ml-matrix's largest eigenvalue where the spectrum is clustered (a band-limited reference)", () => {
    for (const L of [64, 256]) {
      const r = autocorrelation(x, L);
      const R = new Matrix(Array.from({ length: L }, (_, i) => Array.from({ length: L }, (_, j) => r[Math.abs(i - j)]!)));
      const exact = Math.max(...new EigenvalueDecomposition(R, { assumeSymmetric: true }).realEigenvalues);
      expect(Math.abs(toeplitzLambdaMax(r) / exact - 1)).toBeLessThan(1e-9);
    }
  });
});

describe('the one quantile function', () => {
  const values = Array.from(white(5001, 20, 521), (v, i) => v + (i % 7) - 30);
  const h = new DbHistogram();
  for (const v of values) h.add(v);

  it('is the nearest rank to 0.01 dB (the textbook definition: the smallest value with at least q of the values at or below it)', () => {
    const sorted = [...values].sort((a, b) => a - b);
    for (const q of [0.05, 0.5, 0.95, 1]) {
      const rank = Math.ceil(q * sorted.length);
      expect(Math.abs(h.quantile(q)! - sorted[rank - 1]!)).toBeLessThanOrEqual(0.005 + 1e-9);
    }
  });

  const numpy = spawnSync('python3', ['-c', 'import numpy'], { stdio: 'ignore' }).status === 0;
  it.skipIf(!numpy)("agrees with numpy.quantile(method='inverted_cdf') to 0.005 dB", () => {
    const script = 'import json,sys,numpy as np; v=np.array(json.load(sys.stdin)); print(json.dumps([float(np.quantile(v,q,method="inverted_cdf")) for q in (0.05,0.5,0.95)]))';
    const r = spawnSync('python3', ['-c', script], { input: JSON.stringify(values), encoding: 'utf8' });
    const expected = JSON.parse(r.stdout) as number[];
    [0.05, 0.5, 0.95].forEach((q, i) => expect(Math.abs(h.quantile(q)! - expected[i]!)).toBeLessThanOrEqual(0.005 + 1e-9));
  });
});

describe('the exact covariance of a stretch (the covariance method)', () => {
  it('gives the FIR error power exactly: pd - 2 w.p + w.C.w equals the error power of w run over the stretch', () => {
    const L = 12;
    const x = bandLimited(3000, 0.05, 0.3, 0.2, 531);
    const d = through([0.3, -0.1, 0.05], x, white(3000, 0.01, 532));
    const H = L - 1;
    const g = stretchCovariance(x.subarray(1000 - H, 2000), d.subarray(1000, 2000), L);
    const w = Array.from({ length: L }, (_, k) => 0.2 * Math.cos(k));
    let pe = 0;
    for (let i = 1000; i < 2000; i++) {
      let y = 0;
      for (let k = 0; k < L; k++) y += w[k]! * x[i - k]!;
      pe += (d[i]! - y) ** 2;
    }
    let quad = g.pd;
    for (let j = 0; j < L; j++) {
      quad -= 2 * w[j]! * g.p[j]!;
      for (let k = 0; k < L; k++) quad += w[j]! * g.C[j]![k]! * w[k]!;
    }
    expect(Math.abs(quad - pe / 1000)).toBeLessThan(1e-12);
  });
});
