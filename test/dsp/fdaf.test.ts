import { Matrix, solve } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { FdafAdaptiveKernel } from '../../src/dsp/fdaf.js';
import { correlations, distance, norm, spec, through, white, bandLimited } from '../helpers/signals.js';

// PBFDAF: Soo & Pang, IEEE Trans. ASSP 38(2), 1990; Shynk, IEEE SP Magazine 9(1), 1992. The
// constrained form equals time-domain block LMS (Ferrara 1980; Clark, Mitra & Parker 1981,
// recalled from memory as REFERENCES.md says): w += mu sum over the block of e(n) x(n), with
// e(n) computed from the weights held through the block.

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
