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
  /** Cancellation lost against w0, dB, over the whole selection. */
  lossDb: number;
  /**
   * The largest loss over the selection's segments, each with its own p and w0 (a path that
   * changes, a segment with a fault): what the suggestion is judged by.
   */
  worstSegmentLossDb: number;
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

/** The deepest cancellation a prediction reports (see `cancellation` in analyzeExcitation). */
const MAX_PREDICTED_DB = 100;
/** Eigenvalues below this fraction of the largest are numerically zero. */
const NUMERICAL_RANK = 1e-12;

function toeplitz(r: Float64Array): Matrix {
  const L = r.length;
  return new Matrix(Array.from({ length: L }, (_, i) => Array.from({ length: L }, (_, j) => r[Math.abs(i - j)]!)));
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
  /** Exact covariances of stretches of the selection (supervisor windows), each judged on its own. */
  segments?: ReadonlyArray<{ C: Float64Array[]; p: Float64Array; pd: number }>;
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
  const evd = new EigenvalueDecomposition(toeplitz(r), { assumeSymmetric: true });
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

  // The solutions in the eigenbasis: q_i = u_i' p, for the whole selection and each segment.
  const V = evd.eigenvectorMatrix;
  const project = (pv: Float64Array) =>
    order.map(([, idx]) => {
      let s = 0;
      for (let i = 0; i < L; i++) s += V.get(i, idx) * pv[i]!;
      return s;
    });
  const tol = floor;
  /**
   * Predicted cancellation (dB) of w = sum c_i u_i against a desired of power pd:
   * Pe = Pd - 2 sum c_i q_i + sum c_i^2 lambda_i, floored at MAX_PREDICTED_DB below Pd (the
   * difference of nearly equal sums is only that exact).
   */
  const cancellation = (q: number[], pdv: number, c: (i: number) => number) => {
    let pe = pdv;
    for (let i = 0; i < L; i++) pe -= 2 * c(i) * q[i]! - c(i) * c(i) * eigenvalues[i]!;
    return powerDb(pdv) - powerDb(Math.max(pe, pdv * 10 ** (-MAX_PREDICTED_DB / 10)));
  };
  const unregularized = (q: number[]) => (i: number) => (eigenvalues[i]! > tol ? q[i]! / eigenvalues[i]! : 0);
  const leaky = (q: number[], gamma: number) => (i: number) => q[i]! / (Math.max(eigenvalues[i]!, 0) + gamma);
  const q = project(p);
  // Each segment in its own eigenbasis: a path that changes, a reference whose spectrum moves.
  const segments = (opts.segments ?? [])
    .filter((g) => g.pd > 0)
    .map((g) => {
      const e = new EigenvalueDecomposition(new Matrix(g.C.map((row) => Array.from(row))), { assumeSymmetric: true });
      const lambda = e.realEigenvalues;
      const Vs = e.eigenvectorMatrix;
      const qs = lambda.map((_, idx) => {
        let acc = 0;
        for (let i = 0; i < L; i++) acc += Vs.get(i, idx) * g.p[i]!;
        return acc;
      });
      return { lambda, q: qs, pd: g.pd, tol: Math.max(...lambda) * NUMERICAL_RANK };
    });
  const w0 = eigenvalues.map((_, i) => unregularized(q)(i));
  const w0Norm = Math.sqrt(w0.reduce((s, v) => s + v * v, 0));
  // The cancellation a filter can reach uses every direction it can resolve numerically, weak
  // ones included (an adaptive filter approaches it given time); the bias above is about the
  // excited ones.
  const full = (i: number) => (eigenvalues[i]! > lambdaMax * NUMERICAL_RANK ? q[i]! / eigenvalues[i]! : 0);
  const c0 = cancellation(q, pd, full);
  /** A segment's cancellation with per-direction weights c(i) in its own eigenbasis. */
  const segmentCancellation = (g: (typeof segments)[number], c: (i: number) => number) => {
    let pe = g.pd;
    for (let i = 0; i < L; i++) pe -= 2 * c(i) * g.q[i]! - c(i) * c(i) * g.lambda[i]!;
    return powerDb(g.pd) - powerDb(Math.max(pe, g.pd * 10 ** (-MAX_PREDICTED_DB / 10)));
  };
  const c0s = segments.map((g) => segmentCancellation(g, (i) => (g.lambda[i]! > g.tol ? g.q[i]! / g.lambda[i]! : 0)));
  const candidates: LeakCandidate[] = [];
  for (const factor of [1e-1, 3e-2, 1e-2, 3e-3, 1e-3, 3e-4, 1e-4, 3e-5, 1e-5, 1e-6]) {
    const gamma = lambdaMax * factor;
    const wg = leaky(q, gamma);
    // The bias is measured where w0 is defined: along the excited directions.
    let bias = 0;
    for (let i = 0; i < L; i++) if (eigenvalues[i]! > tol) bias += (wg(i) - w0[i]!) ** 2;
    const cg = cancellation(q, pd, wg);
    let worst = c0 - cg;
    segments.forEach((g, k) => (worst = Math.max(worst, c0s[k]! - segmentCancellation(g, (i) => g.q[i]! / (Math.max(g.lambda[i]!, 0) + gamma)))));
    candidates.push({ leak: gamma, configLeak: gamma * opts.leakScale, relativeBias: Math.sqrt(bias) / (w0Norm || 1), cancellationDb: cg, lossDb: c0 - cg, worstSegmentLossDb: worst });
  }
  const suggested = candidates.find((c) => c.worstSegmentLossDb <= opts.maxLossDb) ?? null;
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
