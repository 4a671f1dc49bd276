import { EigenvalueDecomposition, Matrix } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { autocorrelation, toeplitzLambdaMax } from '../../src/analysis/correlation.js';
import { lmsStepBound } from '../../src/dsp/bounds.js';
import { createAdaptiveKernel } from '../../src/dsp/kernels.js';
import { correlations, distance, norm, runKernel, spec, through, white } from '../helpers/signals.js';

/** AR(1) input x[n] = a x[n-1] + w[n]: strongly coloured, a wide eigenvalue spread. */
function ar1(n: number, a: number, seed: number): Float64Array {
  const x = white(n, 1, seed);
  for (let i = 1; i < n; i++) x[i]! += a * x[i - 1]!;
  return x;
}

function lambdaMaxOf(R: number[][]): number {
  return Math.max(...new EigenvalueDecomposition(new Matrix(R)).realEigenvalues);
}

describe('LMS stability bound 2/(lambda_max + gamma) (Haykin, Adaptive Filter Theory 4th ed., ch. 5; docs/REFERENCES.md "LMS")', () => {
  it("tapwarden's Toeplitz power iteration finds ml-matrix's largest eigenvalue (EigenvalueDecomposition)", () => {
    const x = ar1(60_000, 0.9, 21);
    for (const L of [8, 64]) {
      const r = autocorrelation(x, L);
      const R = Array.from({ length: L }, (_, i) => Array.from({ length: L }, (_, j) => r[Math.abs(i - j)]!));
      expect(Math.abs(toeplitzLambdaMax(r) / lambdaMaxOf(R) - 1)).toBeLessThan(1e-4);
    }
  });

  it('the mean weight error v <- (I - mu (R + gamma I)) v converges at 0.99 x bound and diverges at 1.01 x bound', () => {
    const x = ar1(20_000, 0.9, 23);
    const { R } = correlations(x, x, 8, 0, x.length);
    const lambdaMax = lambdaMaxOf(R);
    for (const gamma of [0, 0.3 * lambdaMax]) {
      const A = new Matrix(R).add(Matrix.eye(8).mul(gamma));
      const grow = (factor: number) => {
        const mu = factor * lmsStepBound(lambdaMax, gamma);
        const T = Matrix.eye(8).sub(A.clone().mul(mu));
        let v = Matrix.columnVector(new Array(8).fill(1));
        for (let i = 0; i < 3000; i++) v = T.mmul(v);
        return v.norm() / Math.sqrt(8);
      };
      expect(grow(0.99)).toBeLessThan(1e-3);
      expect(grow(1.01)).toBeGreaterThan(1e3);
    }
  });

  // A random telegraph reference (values +-1, sign flips with probability 0.005): x^2 = 1 always,
  // so the instantaneous x x^T has the trace of R, and with long sign runs lambda_max is within
  // 1 % of tr R: the mean-stability bound is also where a single run turns unstable (derived).
  const L = 4;
  const n = 40_000;
  const rng = white(n, 1, 24);
  const x = new Float64Array(n);
  let sign = 1;
  for (let i = 0; i < n; i++) {
    if (Math.abs(rng[i]!) > 2.807) sign = -sign; // P(|N(0,1)| > 2.807) = 0.005
    x[i] = sign;
  }
  const h = [0.6, -0.2, 0.1, 0.05];
  const d = through(h, x, white(n, 0.01, 25));
  const { R } = correlations(x, d, L, 0, n);
  const lambdaMax = lambdaMaxOf(R);

  for (const gamma of [0, 1]) {
    it(`the LMS kernel, gamma = ${gamma}: converges at 0.95 x bound, diverges at 1.05 x bound (lambda_max from ml-matrix)`, () => {
      const bound = lmsStepBound(lambdaMax, gamma);
      const below = runKernel(spec({ taps: L, step: 0.95 * bound, leak: gamma }), x, d);
      const above = runKernel(spec({ taps: L, step: 1.05 * bound, leak: gamma }), x, d);
      expect(below.kernel.weightSaturations).toBe(0);
      expect(norm(below.kernel.getWeights())).toBeLessThan(norm(h));
      // Diverged: the weights ran into the float guard (weightLimit 1e6) and stay large.
      expect(above.kernel.weightSaturations).toBeGreaterThan(0);
      expect(norm(above.kernel.getWeights())).toBeGreaterThan(1e5);
    });
  }
});

describe('LMS steady-state misadjustment (Rey Vega & Rey, A Rapid Introduction to Adaptive Filtering, eqs. 4.131-4.133)', () => {
  it('white input, sigma_x^2 = 1, L = 32, mu = 0.005: M close to mu tr R / (2 - mu tr R) = 0.087 and to mu tr R / 2', () => {
    const L = 32;
    const mu = 0.005;
    const n = 1_200_000;
    const x = white(n, 1, 31);
    const v = white(n, 0.1, 32);
    const h = Array.from({ length: L }, (_, k) => 0.7 ** k * (k % 2 ? -1 : 1));
    const d = through(h, x, v);
    const run = runKernel(spec({ taps: L, step: mu }), x, d);
    const from = 20_000; // > 10 MSE time constants, 1/(2 mu lambda) = 100 samples
    let mse = 0;
    let noise = 0;
    let px = 0;
    for (let i = from; i < n; i++) {
      mse += run.e[i]! ** 2;
      noise += v[i]! ** 2;
      px += x[i]! ** 2;
    }
    const trR = (L * px) / (n - from);
    const measured = mse / noise - 1;
    const exact = (mu * trR) / (2 - mu * trR);
    expect(exact).toBeCloseTo(0.087, 2); // the worked set in docs/REFERENCES.md (derived)
    expect(Math.abs(measured / exact - 1)).toBeLessThan(0.1);
    expect(Math.abs(measured / ((mu * trR) / 2) - 1)).toBeLessThan(0.2);
  });
});

describe('NLMS (Haykin 4th ed. ch. 6 [recalled from memory]; Slock, IEEE Trans. SP 41(9), 1993)', () => {
  const L = 16;
  const h = Array.from({ length: L }, (_, k) => 0.8 ** k * Math.sin(k + 1));

  /** Samples until the misalignment ||w - h|| / ||h|| first falls below `db`. */
  function samplesTo(db: number, mu: number, seed: number, n = 4000): number {
    const x = white(n, 1, seed);
    const d = through(h, x);
    const k = createAdaptiveKernel(spec({ algorithm: 'nlms', taps: L, step: mu, delta: 1e-9 }));
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    for (let i = 0; i < n; i++) {
      k.run(x, d, null, y, e, i, i + 1);
      if (20 * Math.log10(distance(k.getWeights(), h) / norm(h)) < db) return i + 1;
    }
    return Infinity;
  }

  it('is stable for 0 < mu < 2 and not at mu = 2.2', () => {
    for (const mu of [0.1, 0.5, 1, 1.5, 1.9]) expect(samplesTo(-30, mu, 41, 20_000)).toBeLessThan(20_000);
    expect(samplesTo(-30, 2.2, 41, 20_000)).toBe(Infinity);
  });

  it('converges fastest near mu = 1 on white input', () => {
    const mean = (mu: number) => [51, 52, 53, 54, 55].reduce((s, seed) => s + samplesTo(-40, mu, seed), 0) / 5;
    const t1 = mean(1);
    for (const mu of [0.3, 0.6, 1.4, 1.7]) expect(t1).toBeLessThan(mean(mu));
  });

  it('with mu = 1 and delta = 0 the a-posteriori error is zero (docs/REFERENCES.md, derived)', () => {
    const n = 300;
    const x = white(n, 1, 61);
    const d = white(n, 1, 62); // any desired signal
    const k = createAdaptiveKernel(spec({ algorithm: 'nlms', taps: L, step: 1, delta: 0 }));
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    k.run(x, d, null, y, e, 0, n);
    // e+ = d[n-1] - w(after the last update) . x(n-1), with the dot product formed here.
    const w = k.getWeights();
    let yPost = 0;
    for (let j = 0; j < L; j++) yPost += w[j]! * x[n - 1 - j]!;
    expect(Math.abs(e[n - 1]!)).toBeGreaterThan(0.01);
    expect(Math.abs(d[n - 1]! - yPost)).toBeLessThan(1e-12);
  });
});
