import { butterworth, filterInPlace } from '../../src/dsp/design.js';
import { createAdaptiveKernel } from '../../src/dsp/kernels.js';
import { GaussianNoise } from '../../src/dsp/noise.js';
import type { AdaptiveKernel, AdaptiveSpec } from '../../src/dsp/types.js';

/** A kernel spec with test defaults. */
export function spec(over: Partial<AdaptiveSpec> = {}): AdaptiveSpec {
  return {
    algorithm: 'lms',
    taps: 8,
    step: 0.01,
    delta: 0,
    leak: 0,
    leakShift: null,
    meanRemovalEvery: null,
    arithmetic: 'float64',
    rounding: 'nearest',
    weightLimit: 1e6,
    ...over,
  };
}

export function white(n: number, sigma: number, seed: number): Float64Array {
  const x = new Float64Array(n);
  new GaussianNoise(seed).fill(x, sigma);
  return x;
}

/** White noise through an 8th-order band-pass: DC-blocked and band-limited, at unit-ish power. */
export function bandLimited(n: number, loFraction: number, hiFraction: number, rms: number, seed: number): Float64Array {
  const x = white(n, 1, seed);
  filterInPlace([...butterworth('highpass', 8, loFraction, 1), ...butterworth('lowpass', 8, hiFraction, 1)], x);
  let s = 0;
  for (const v of x) s += v * v;
  const g = rms / Math.sqrt(s / n);
  return x.map((v) => v * g);
}

/** d = h * x + noise (FIR convolution from rest). */
export function through(h: ArrayLike<number>, x: Float64Array, noise?: Float64Array): Float64Array {
  const d = new Float64Array(x.length);
  for (let i = 0; i < x.length; i++) {
    let acc = noise ? noise[i]! : 0;
    for (let k = 0; k < h.length && k <= i; k++) acc += h[k]! * x[i - k]!;
    d[i] = acc;
  }
  return d;
}

/** Sample autocorrelation matrix R and cross-correlation p over samples [from, to). */
export function correlations(x: Float64Array, d: Float64Array, L: number, from: number, to: number): { R: number[][]; p: number[] } {
  const R = Array.from({ length: L }, () => new Array<number>(L).fill(0));
  const p = new Array<number>(L).fill(0);
  const n = to - from;
  for (let i = from; i < to; i++) {
    for (let a = 0; a < L; a++) {
      const xa = i - a >= 0 ? x[i - a]! : 0;
      p[a]! += (xa * d[i]!) / n;
      for (let b = a; b < L; b++) R[a]![b]! += (xa * (i - b >= 0 ? x[i - b]! : 0)) / n;
    }
  }
  for (let a = 0; a < L; a++) for (let b = 0; b < a; b++) R[a]![b] = R[b]![a]!;
  return { R, p };
}

export interface KernelRun {
  kernel: AdaptiveKernel;
  y: Float64Array;
  e: Float64Array;
  /** Weights averaged over samples [averageFrom, n), sampled every `every` samples. */
  meanWeights: Float64Array;
}

/** Runs a kernel over x, d in blocks, averaging the weights over the tail. */
export function runKernel(s: AdaptiveSpec, x: Float64Array, d: Float64Array, averageFrom = x.length, every = 16): KernelRun {
  const kernel = createAdaptiveKernel(s);
  const y = new Float64Array(x.length);
  const e = new Float64Array(x.length);
  const meanWeights = new Float64Array(s.taps);
  let count = 0;
  for (let i = 0; i < x.length; i += every) {
    const end = Math.min(x.length, i + every);
    kernel.run(x, d, null, y, e, i, end);
    if (end > averageFrom) {
      const w = kernel.getWeights();
      for (let k = 0; k < s.taps; k++) meanWeights[k]! += w[k]!;
      count++;
    }
  }
  if (count > 0) for (let k = 0; k < s.taps; k++) meanWeights[k]! /= count;
  return { kernel, y, e, meanWeights };
}

export function norm(v: ArrayLike<number>): number {
  let s = 0;
  for (let i = 0; i < v.length; i++) s += v[i]! * v[i]!;
  return Math.sqrt(s);
}

export function distance(a: ArrayLike<number>, b: ArrayLike<number>): number {
  let s = 0;
  for (let i = 0; i < a.length; i++) s += (a[i]! - b[i]!) ** 2;
  return Math.sqrt(s);
}
