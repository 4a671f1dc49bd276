import { describe, expect, it } from 'vitest';
import { analyzeExcitation, quietBands } from '../../src/analysis/excitation.js';
import { DriftForecaster, trend } from '../../src/analysis/forecast.js';
import { WelchPsd } from '../../src/analysis/welch.js';
import { Matrix, solve } from 'ml-matrix';
import { correlations, through, white } from '../helpers/signals.js';

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
  const none = { frequencies: [0, 1], psd: [1, 1] };

  it('white noise: every eigenvalue near the variance (R = s^2 I)', () => {
    const a = analyzeExcitation({ x: white(200_000, 0.3, 502), d: null, taps: L, leak: 0, thresholdDb: -60, maxLossDb: 0.5, ...none });
    for (const l of a.eigenvalues) expect(Math.abs(l / 0.09 - 1)).toBeLessThan(0.05);
    expect(a.unexcitedDirections).toBe(0);
  });

  it('a sinusoid: rank two, lambda = (A^2 / 4)(L +- |sin(L w) / sin(w)|), the rest unexcited', () => {
    const A = 0.5;
    const w = (2 * Math.PI * 1100) / fs;
    const x = Float64Array.from({ length: 400_000 }, (_, i) => A * Math.cos(w * i + 0.3));
    // The biased estimate r[k] (1/N sum) tapers by (1 - k/N), so the other 30 eigenvalues are small
    // (about -45 dB re lambda_max here) rather than zero: count them against -30 dB.
    const a = analyzeExcitation({ x, d: null, taps: L, leak: 0, thresholdDb: -30, maxLossDb: 0.5, ...none });
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
    const a = analyzeExcitation({ x, d, taps: L, leak: 0, thresholdDb: -60, maxLossDb: 0.5, ...none });
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

describe('drift forecast', () => {
  it('fits the weight-mean trend by least squares', () => {
    const { slope, last } = trend([0, 1, 2, 3], [1, 3, 5, 7]);
    expect(slope).toBeCloseTo(2, 12);
    expect(last).toBeCloseTo(7, 12);
  });

  it('moves the extreme tap at the mean drift rate to the limit', () => {
    const f = new DriftForecaster(10);
    for (let t = 0; t <= 9; t++) f.push(t, -0.01 * t, -0.5 - 0.01 * t, 0.3 - 0.01 * t);
    const r = f.forecast(1, 0.2);
    // min tap at -0.59 moving at -0.01/s reaches -1 in 41 s; |mean| 0.09 reaches 0.2 in 11 s.
    expect(r.limitEtaSeconds).toBeCloseTo(41, 6);
    expect(r.meanBoundEtaSeconds).toBeCloseTo(11, 6);
    const flat = new DriftForecaster(10);
    for (let t = 0; t <= 9; t++) flat.push(t, 0.001 * Math.sin(t), -0.5, 0.5);
    expect(flat.forecast(1, 0.2).limitEtaSeconds === null || flat.forecast(1, 0.2).limitEtaSeconds! > 100).toBe(true);
  });
});
