import { EigenvalueDecomposition, Matrix, solve } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { bandLimited, correlations, distance, norm, runKernel, spec, through, white } from '../helpers/signals.js';

// Leaky LMS, w <- (1 - mu gamma) w + mu e x, converges in the mean to (R + gamma I)^-1 p
// (Haykin, Neural Networks and Learning Machines, 3rd ed., problems 3.4-3.5; Mayyas & Aboulnasr,
// IEEE Trans. SP 45(4), 1997). The expected weights are solved with ml-matrix's `solve` from R
// and p estimated on the same data; the LMS weights are time-averaged over the tail of the run.

function wiener(R: number[][], p: number[], gamma: number): number[] {
  const A = new Matrix(R).add(Matrix.eye(R.length).mul(gamma));
  return solve(A, Matrix.columnVector(p)).to1DArray();
}

describe('converged mean weights equal (R + gamma I)^-1 p (ml-matrix solve)', () => {
  it('gamma = 0, full-rank (white) input, float64 LMS', () => {
    const n = 200_000;
    const h = [0.8, -0.4, 0.25, 0.1, -0.05, 0.3, -0.2, 0.05];
    const x = white(n, 1, 1);
    const d = through(h, x, white(n, 0.1, 2));
    const run = runKernel(spec({ taps: 8, step: 0.002 }), x, d, n / 2);
    const { R, p } = correlations(x, d, 8, n / 2, n);
    const expected = wiener(R, p, 0);
    expect(distance(run.meanWeights, expected) / norm(expected)).toBeLessThan(0.005);
  });

  it('gamma > 0, band-limited DC-blocked input: the leak decides the unexcited directions', () => {
    const n = 300_000;
    const L = 16;
    const gamma = 0.05;
    const x = bandLimited(n, 0.08, 0.22, 0.5, 3);
    const h = Array.from({ length: L }, (_, k) => 0.9 ** k * Math.cos(0.9 * k));
    const d = through(h, x, white(n, 0.01, 4));
    const run = runKernel(spec({ taps: L, step: 0.02, leak: gamma }), x, d, n / 2);
    const { R, p } = correlations(x, d, L, n / 2, n);
    const expected = wiener(R, p, gamma);
    // The input is ill-conditioned: without the leak the solution is far from this one.
    const eig = new EigenvalueDecomposition(new Matrix(R)).realEigenvalues;
    expect(Math.min(...eig) / Math.max(...eig)).toBeLessThan(1e-4);
    const unregularized = wiener(R, p, 1e-9);
    expect(distance(unregularized, expected) / norm(expected)).toBeGreaterThan(0.1);
    expect(distance(run.meanWeights, expected) / norm(expected)).toBeLessThan(0.012);
  });

  it('gamma > 0 in NLMS with the unnormalized leak: the mean steady state is (R + gamma tr(R) I)^-1 p', () => {
    // README "Leak": w <- (1 - mu gamma) w + mu e x / (delta + ||x||^2). For a spherically
    // symmetric input vector (white Gaussian), E[x x^T / ||x||^2] = I / L exactly, so with delta
    // negligible the mean fixed point is gamma w = (p - R w) / (L sigma^2), i.e.
    // (R + gamma tr(R) I) w = p (derived, docs/REFERENCES.md "Leak"; independence assumption as in
    // Haykin, Adaptive Filter Theory, ch. 6).
    const n = 200_000;
    const L = 32;
    const gamma = 0.05;
    const x = white(n, 0.3, 5);
    const h = Array.from({ length: L }, (_, k) => (k % 3 === 0 ? 0.2 : -0.1) * 0.95 ** k);
    const d = through(h, x, white(n, 0.01, 6));
    const run = runKernel(spec({ algorithm: 'nlms', taps: L, step: 0.1, delta: 1e-6, leak: gamma }), x, d, n / 2);
    const { R, p } = correlations(x, d, L, n / 2, n);
    const trace = R.reduce((s, row, i) => s + row[i]!, 0);
    const expected = wiener(R, p, gamma * trace);
    expect(distance(wiener(R, p, 0), expected) / norm(expected)).toBeGreaterThan(0.2);
    // The old normalized leak's fixed point, (R + gamma I)^-1 p, is far from this one.
    expect(distance(wiener(R, p, gamma), expected) / norm(expected)).toBeGreaterThan(0.2);
    expect(distance(run.meanWeights, expected) / norm(expected)).toBeLessThan(0.03);
  });
});

describe('noise injection (Haykin, Neural Networks and Learning Machines, 3rd ed., problems 3.4-3.5)', () => {
  it('white noise of variance s^2 on the adaptive input acts like a leak gamma = s^2: weights -> (R + s^2 I)^-1 p', async () => {
    const { DualPathEngine } = await import('../../src/engine/dualPath.js');
    const n = 400_000;
    const L = 16;
    const x = bandLimited(n, 0.05, 0.2, 0.3, 81);
    const h = Array.from({ length: L }, (_, k) => 0.6 * 0.8 ** k * Math.cos(0.7 * k));
    const d = through(h, x, white(n, 0.005, 82));
    const noiseDb = -20; // s^2 = 0.01
    const engine = new DualPathEngine({
      sampleRate: 8000,
      filter: { ...spec({ taps: L, step: 0.02 }), noiseInjectionDb: noiseDb, noiseSeed: 5 },
      supervisor: {
        windowSeconds: 1,
        crossfadeSeconds: 0,
        minCancellationDb: 0,
        maxWeightMean: 1,
        marginDb: 0,
        passesRequired: 1,
        rollbackAfter: null,
        minReferencePowerDb: null,
      },
      outputSignal: 'error',
    });
    const out = new Float64Array(n);
    const adaptiveOut = new Float64Array(n);
    const mean = new Float64Array(L);
    let count = 0;
    for (let i = 0; i < n; i += 100) {
      engine.process(x.subarray(i, i + 100), d.subarray(i, i + 100), out.subarray(i), adaptiveOut.subarray(i), 100);
      if (i >= n / 2) {
        engine.adaptiveWeights().forEach((v, k) => (mean[k]! += v));
        count++;
      }
    }
    for (let k = 0; k < L; k++) mean[k]! /= count;
    const { R, p } = correlations(x, d, L, n / 2, n);
    const expected = wiener(R, p, 10 ** (noiseDb / 10));
    expect(distance(wiener(R, p, 0), expected) / norm(expected)).toBeGreaterThan(0.1);
    expect(distance(mean, expected) / norm(expected)).toBeLessThan(0.03);
  });
});
