import { describe, expect, it } from 'vitest';
import { createAdaptiveKernel } from '../../src/dsp/kernels.js';
import type { AdaptiveSpec } from '../../src/dsp/types.js';
import { bandLimited, spec, through, white } from '../helpers/signals.js';

// Gitlin, Meadors & Weinstein, "The tap-leakage algorithm...", Bell System Technical Journal
// 61(8), 1982: with many near-equivalent tap settings (an input with unexcited directions), biased
// tap-update arithmetic drifts the taps until the registers overflow; leaking every tap keeps
// them bounded. The 16-bit leak as a right shift, w <- w - (w >> k) with k near 14, is common
// practice (no published source).

const n = 400_000;
const L = 32;
// DC-blocked and band-limited: nothing below 0.06 fs or above 0.2 fs. A 32-tap filter resolves
// fs/32 ~ 0.03 fs, so its slowly varying (mean-like) directions see no excitation at all.
const x = bandLimited(n, 0.06, 0.2, 0.12, 71);
const h = Array.from({ length: L }, (_, k) => 0.5 * 0.85 ** k * Math.cos(1.1 * k));
const d = through(h, x, white(n, 0.003, 72));

function trace(s: AdaptiveSpec) {
  const k = createAdaptiveKernel(s);
  const y = new Float64Array(n);
  const e = new Float64Array(n);
  const stats = { mean: 0, norm: 0, maxAbs: 0, min: 0, max: 0 };
  let peakMaxAbs = 0;
  let peakMean = 0;
  const block = 4000;
  for (let i = 0; i < n; i += block) {
    k.run(x, d, null, y, e, i, i + block);
    k.weightStats(stats);
    peakMaxAbs = Math.max(peakMaxAbs, stats.maxAbs);
    peakMean = Math.max(peakMean, Math.abs(stats.mean));
  }
  return { saturations: k.weightSaturations, peakMaxAbs, peakMean };
}

describe('Q15 weight drift on a DC-blocked, band-limited input', () => {
  const base = spec({ taps: L, step: 0.02, arithmetic: 'q15', rounding: 'truncate' });

  it('with truncating updates and no leak, the weight mean drifts and taps saturate', () => {
    const r = trace(base);
    expect(r.peakMean).toBeGreaterThan(0.25);
    expect(r.peakMaxAbs).toBe(1); // a tap sits at -1.0, the Q15 limit
    expect(r.saturations).toBeGreaterThan(0);
  });

  it('with leakShift 14 the weights stay bounded (common practice)', () => {
    const r = trace({ ...base, leakShift: 14 });
    expect(r.saturations).toBe(0);
    expect(r.peakMaxAbs).toBeLessThan(0.9);
    expect(r.peakMean).toBeLessThan(0.05);
  });

  it('periodic weight-mean removal also keeps the mean at zero', () => {
    const r = trace({ ...base, meanRemovalEvery: 256 });
    expect(r.saturations).toBe(0);
    expect(r.peakMean).toBeLessThan(0.01);
  });

  it('the same filter in float64 does not drift (the bias is the arithmetic, not the algorithm)', () => {
    const r = trace({ ...base, arithmetic: 'float64' });
    expect(r.saturations).toBe(0);
    expect(r.peakMean).toBeLessThan(0.05);
  });
});
