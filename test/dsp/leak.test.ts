import { Matrix, solve } from 'ml-matrix';
import { describe, expect, it } from 'vitest';
import { createAdaptiveKernel } from '../../src/dsp/kernels.js';
import type { AdaptiveSpec } from '../../src/dsp/types.js';
import { bandLimited, distance, norm, spec, through, white } from '../helpers/signals.js';

// The leak, w <- (1 - mu gamma) w + mu_n e x, with the unnormalized step mu even in NLMS
// (README "Leak"). With zero input the update term vanishes and w(n) = (1 - mu gamma)^n w(0)
// (docs/REFERENCES.md, derived from Haykin, Neural Networks and Learning Machines, 3rd ed.,
// problems 3.4-3.5). Scaling the leak by the normalized step instead made (1 - mu_n gamma) go
// below -1 as ||x||^2 -> 0: a silent reference drove the taps to the weight limit.

const fs = 4000;
const L = 16;

/** A reference that stops for `silentSeconds` in the middle (a motor stop, a pulled sensor). */
function withDropout(silentSeconds: number) {
  const n = 12 * fs;
  const x = bandLimited(n, 0.03, 0.3, 0.2, 801);
  const h = Array.from({ length: L }, (_, k) => 0.6 * 0.8 ** k * Math.cos(0.7 * k));
  const d = through(h, x, white(n, 0.002, 802));
  const from = 4 * fs;
  const to = from + silentSeconds * fs;
  for (let i = from - L; i < to; i++) {
    x[i] = 0;
    d[i] = 0;
  }
  return { x, d, from, to, h };
}

function runTo(s: AdaptiveSpec, x: Float64Array, d: Float64Array, marks: number[]) {
  const k = createAdaptiveKernel(s);
  const y = new Float64Array(x.length);
  const e = new Float64Array(x.length);
  const at: Float64Array[] = [];
  const clipped: number[] = [];
  let i = 0;
  for (const m of marks) {
    k.run(x, d, null, y, e, i, m);
    at.push(k.getWeights());
    clipped.push(k.weightSaturations + k.signalSaturations);
    i = m;
  }
  return { k, at, clipped, y, e };
}

describe('leaky NLMS through a silent reference', () => {
  const { x, d, from, to } = withDropout(5);
  for (const arithmetic of ['float64', 'float32', 'q15', 'q31'] as const) {
    it(`${arithmetic}: the weights decay as (1 - mu gamma)^n through 5 s of silence and nothing clips`, () => {
      // The silence starts L samples before `from`: by then the delay line holds only zeros, so
      // from `from` on the update term is exactly zero.
      const mu = 0.5;
      // mu gamma = 1e-4 per sample: e^-2 over 5 s at 4 kHz, and above the q15 LSB (2^-15).
      const gamma = 2e-4;
      const s = spec({ algorithm: 'nlms', taps: L, step: mu, delta: 1e-6, leak: gamma, arithmetic, rounding: 'nearest', weightLimit: 1000 });
      const r = runTo(s, x, d, [from, to, x.length]);
      const [before, after] = r.at;
      const steps = to - from;
      expect(norm(before!)).toBeGreaterThan(0.5);
      if (arithmetic === 'q15') {
        // 16-bit products round every step, so the decay stalls where lf w < half an LSB; it
        // never grows: every tap is at most its old magnitude.
        for (let k = 0; k < L; k++) expect(Math.abs(after![k]!)).toBeLessThanOrEqual(Math.abs(before![k]!));
        expect(norm(after!)).toBeLessThan(0.5 * norm(before!));
      } else {
        // The factor the arithmetic holds: mu gamma rounded to its format (q31: lfQ / 2^31).
        const c = arithmetic === 'q31' ? Math.round((Math.round(mu * 65536) * Math.round(gamma * 2 ** 31)) / 65536) / 2 ** 31 : arithmetic === 'float32' ? Math.fround(mu * gamma) : mu * gamma;
        const expected = before!.map((v) => v * (1 - c) ** steps);
        // Each step's store rounds by at most half a unit of the format (float32: 2^-24 |w|).
        const unit = arithmetic === 'float64' ? 1e-15 : arithmetic === 'float32' ? 2 ** -24 : 2 ** -31;
        expect(distance(after!, expected)).toBeLessThan(steps * unit * Math.sqrt(L));
        expect(norm(after!) / norm(before!)).toBeCloseTo(Math.exp(-2), 1);
      }
      // Nothing clips through the silence (fixed point may clip a loud input peak elsewhere).
      expect(r.clipped[1]).toBe(r.clipped[0]);
      expect(r.k.weightSaturations).toBe(0);
      // And it learns again afterwards: the last second cancels.
      let pe = 0;
      let pd = 0;
      for (let i = x.length - fs; i < x.length; i++) {
        pe += r.e[i]! ** 2;
        pd += d[i]! ** 2;
      }
      expect(10 * Math.log10(pd / pe)).toBeGreaterThan(20);
    });
  }

  it('LMS keeps the same decay (its step is already unnormalized)', () => {
    const s = spec({ algorithm: 'lms', taps: L, step: 0.05, leak: 1e-3 });
    const r = runTo(s, x, d, [from, to]);
    const factor = (1 - 0.05 * 1e-3) ** (to - from);
    expect(distance(r.at[1]!, r.at[0]!.map((v) => v * factor))).toBeLessThan(1e-9);
  });
});

describe('leaky NLMS steady state', () => {
  it('converges to (Rn + gamma I)^-1 pn with the normalized correlations Rn = E[x x^T / N], pn = E[d x / N], N = delta + ||x||^2 (ml-matrix solve; derived: the fixed point of the mean update)', () => {
    const n = 400_000;
    const x = white(n, 0.3, 811);
    for (let i = 1; i < n; i++) x[i]! += 0.5 * x[i - 1]!;
    const h = Array.from({ length: L }, (_, k) => 0.5 * 0.7 ** k * (k % 2 ? -1 : 1));
    const d = through(h, x, white(n, 0.01, 812));
    const gamma = 0.1;
    const delta = 1e-6;
    const s = spec({ algorithm: 'nlms', taps: L, step: 0.05, delta, leak: gamma });
    const k = createAdaptiveKernel(s);
    const y = new Float64Array(n);
    const e = new Float64Array(n);
    const mean = new Float64Array(L);
    let count = 0;
    for (let i = 0; i < n; i += 64) {
      k.run(x, d, null, y, e, i, i + 64);
      if (i >= n / 2) {
        k.getWeights().forEach((v, j) => (mean[j]! += v));
        count++;
      }
    }
    for (let j = 0; j < L; j++) mean[j]! /= count;
    // The normalized correlations over the second half, by direct sums.
    const Rn = Array.from({ length: L }, () => new Array<number>(L).fill(0));
    const pn = new Array<number>(L).fill(0);
    for (let i = n / 2; i < n; i++) {
      let N = delta;
      for (let a = 0; a < L; a++) N += x[i - a]! ** 2;
      for (let a = 0; a < L; a++) {
        pn[a]! += (d[i]! * x[i - a]!) / N;
        for (let b = 0; b < L; b++) Rn[a]![b]! += (x[i - a]! * x[i - b]!) / N;
      }
    }
    const m = n / 2;
    const R = new Matrix(Rn).div(m);
    const p = Matrix.columnVector(pn).div(m);
    const leaky = solve(R.clone().add(Matrix.eye(L).mul(gamma)), p).to1DArray();
    const plain = solve(R, p).to1DArray();
    expect(distance(mean, leaky) / norm(leaky)).toBeLessThan(0.02);
    expect(distance(leaky, plain) / norm(plain)).toBeGreaterThan(0.1); // the leak did something
  });
});
