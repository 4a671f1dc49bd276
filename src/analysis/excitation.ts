import { EigenvalueDecomposition, Matrix } from 'ml-matrix';
import { lmsStepBound, NLMS_STEP_BOUND } from '../dsp/bounds.js';
import { powerDb } from '../dsp/level.js';
import type { Correlations } from './correlation.js';

/**
 * Why an input lets weights drift: the eigenvalues of the L x L autocorrelation matrix R of the
 * reference (its eigenvectors are the directions a filter can move in; a direction with a tiny
 * eigenvalue is one the error never corrects), the frequency bands with no energy, the step
 * bounds, and a leak that lifts the unexcited directions at a predicted, small cost.
 */

export interface Band {
  loHz: number;
  hiHz: number;
}

export interface LeakCandidate {
  /** gamma as added to R: (R + gamma I)^-1 p. */
  leak: number;
  /** The filter.leak that gives it for the algorithm (LMS: gamma; NLMS, pbfdaf: gamma / (delta + tr R)). */
  configLeak: number;
  /**
   * ||(R + gamma I)^-1 p - w0|| / ||w0||, with w0 the unregularized solution R^+ p over the
   * directions the input excites (above the threshold; along the others R^-1 p only fits noise).
   */
  relativeBias: number;
  /** Predicted cancellation with the leaky solution, dB. */
  cancellationDb: number;
  /** Cancellation lost against w0, dB. */
  lossDb: number;
}

export interface ExcitationAnalysis {
  taps: number;
  /** Samples R and p were estimated over. */
  samplesUsed: number;
  referencePowerDb: number;
  eigenvalues: number[];
  lambdaMax: number;
  lambdaMin: number;
  /** lambda_max / lambda_min; null when lambda_min is not positive. */
  eigenvalueSpread: number | null;
  thresholdDb: number;
  /** Eigenvalues below lambda_max * 10^(thresholdDb/10): directions the input does not excite. */
  unexcitedDirections: number;
  /** 10 log10 (u' R u / lambda_max) for u the normalized all-ones vector: how much the weight mean is excited. */
  meanDirectionDb: number;
  unexcitedBands: Band[];
  stepBounds: { lms: number; lmsTraceBound: number; nlms: number };
  leak: {
    current: number;
    algorithm: string;
    /** The largest candidate gamma (re R) with loss <= maxLossDb, and the filter.leak for it. */
    suggested: number | null;
    suggestedConfig: number | null;
    maxLossDb: number;
    candidates: LeakCandidate[];
  } | null;
}

/** Contiguous frequency ranges where the PSD is below its peak by more than `thresholdDb`. */
export function quietBands(frequencies: ArrayLike<number>, psd: ArrayLike<number>, thresholdDb: number): Band[] {
  let peak = 0;
  for (let k = 0; k < psd.length; k++) peak = Math.max(peak, psd[k]!);
  const floor = peak * 10 ** (thresholdDb / 10);
  const bands: Band[] = [];
  let start = -1;
  for (let k = 0; k <= psd.length; k++) {
    const quiet = k < psd.length && psd[k]! < floor;
    if (quiet && start < 0) start = k;
    if (!quiet && start >= 0) {
      if (k - start >= 2) bands.push({ loHz: frequencies[start]!, hiHz: frequencies[k - 1]! });
      start = -1;
    }
  }
  return bands;
}

/**
 * Analyzes an L-tap filter's excitation from the reference's (and, with p, the desired's)
 * correlations. `leakScale` turns a gamma added to R into the algorithm's filter.leak (1 for LMS,
 * 1/(delta + tr R) for the normalized algorithms, whose leak multiplies the unnormalized step).
 * The band list comes from the caller's PSD (Welch over the whole selection).
 */
export function analyzeExcitation(opts: {
  correlations: Correlations;
  withDesired: boolean;
  taps: number;
  leak: number;
  algorithm: string;
  leakScale: number;
  thresholdDb: number;
  maxLossDb: number;
  frequencies: ArrayLike<number>;
  psd: ArrayLike<number>;
}): ExcitationAnalysis {
  const { taps: L, thresholdDb } = opts;
  const { r, p, pd } = opts.correlations;
  const R = new Matrix(Array.from({ length: L }, (_, i) => Array.from({ length: L }, (_, j) => r[Math.abs(i - j)]!)));
  const evd = new EigenvalueDecomposition(R, { assumeSymmetric: true });
  const order = evd.realEigenvalues.map((v, i) => [v, i] as const).sort((a, b) => b[0] - a[0]);
  const eigenvalues = order.map(([v]) => v);
  const lambdaMax = eigenvalues[0]!;
  const lambdaMin = eigenvalues[L - 1]!;
  const floor = lambdaMax * 10 ** (thresholdDb / 10);
  let ones = 0;
  for (let i = 0; i < L; i++) for (let j = 0; j < L; j++) ones += r[Math.abs(i - j)]!;
  const trace = L * r[0]!;
  const analysis: ExcitationAnalysis = {
    taps: L,
    samplesUsed: opts.correlations.n,
    referencePowerDb: powerDb(r[0]!),
    eigenvalues,
    lambdaMax,
    lambdaMin,
    eigenvalueSpread: lambdaMin > 0 ? lambdaMax / lambdaMin : null,
    thresholdDb,
    unexcitedDirections: eigenvalues.filter((v) => v < floor).length,
    meanDirectionDb: powerDb(ones / L / lambdaMax),
    unexcitedBands: quietBands(opts.frequencies, opts.psd, thresholdDb),
    stepBounds: { lms: lmsStepBound(lambdaMax, opts.leak), lmsTraceBound: 2 / (trace + L * opts.leak), nlms: NLMS_STEP_BOUND },
    leak: null,
  };
  if (!opts.withDesired) return analysis;

  // The solutions in the eigenbasis: q_i = u_i' p.
  const V = evd.eigenvectorMatrix;
  const q = order.map(([, idx]) => {
    let s = 0;
    for (let i = 0; i < L; i++) s += V.get(i, idx) * p[i]!;
    return s;
  });
  const tol = floor;
  // With w = sum c_i u_i: Pe = Pd - 2 sum c_i q_i + sum c_i^2 lambda_i.
  const errorPower = (c: number[]) => pd - c.reduce((s, ci, i) => s + 2 * ci * q[i]! - ci * ci * eigenvalues[i]!, 0);
  const w0 = eigenvalues.map((l, i) => (l > tol ? q[i]! / l : 0));
  const w0Norm = Math.sqrt(w0.reduce((s, v) => s + v * v, 0));
  const c0 = powerDb(pd) - powerDb(errorPower(w0));
  const candidates: LeakCandidate[] = [];
  for (const factor of [1e-1, 3e-2, 1e-2, 3e-3, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 1e-6]) {
    const gamma = lambdaMax * factor;
    const wg = eigenvalues.map((l, i) => q[i]! / (Math.max(l, 0) + gamma));
    // The bias is measured where w0 is defined: along the excited directions.
    let bias = 0;
    for (let i = 0; i < L; i++) if (eigenvalues[i]! > tol) bias += (wg[i]! - w0[i]!) ** 2;
    const cg = powerDb(pd) - powerDb(errorPower(wg));
    candidates.push({ leak: gamma, configLeak: gamma * opts.leakScale, relativeBias: Math.sqrt(bias) / (w0Norm || 1), cancellationDb: cg, lossDb: c0 - cg });
  }
  const suggested = candidates.find((c) => c.lossDb <= opts.maxLossDb) ?? null;
  analysis.leak = {
    current: opts.leak,
    algorithm: opts.algorithm,
    suggested: suggested?.leak ?? null,
    suggestedConfig: suggested?.configLeak ?? null,
    maxLossDb: opts.maxLossDb,
    candidates,
  };
  return analysis;
}
