/**
 * Step-size bounds (tapwarden's convention w <- w + mu e x).
 * - LMS converges in the mean for 0 < mu < 2 / (lambda_max + gamma) (Haykin, Adaptive Filter
 *   Theory, 4th ed., ch. 5, with the leak's gamma I added to R).
 * - Its mean square stays bounded only for smaller steps; 0 < mu < 2 / tr(R + gamma I) is the
 *   usual sufficient bound (Kuo, Lee & Tian, Real-Time Digital Signal Processing, eq. 8.3.5;
 *   Rey Vega & Rey, A Rapid Introduction to Adaptive Filtering, eq. 4.106), and for Gaussian
 *   input mu < 2 / (3 tr(R + gamma I)) (Horowitz & Senne, IEEE Trans. ASSP 29(3), 1981, recalled
 *   from memory). tr(R) = L E[x^2].
 * - NLMS is stable for 0 < mu < 2 whatever the input.
 */
export function lmsStepBound(lambdaMax: number, leak: number): number {
  return 2 / (lambdaMax + leak);
}

export interface LmsStepBounds {
  /** 2 / (lambda_max + gamma): convergence of the mean weights. */
  readonly mean: number;
  /** 2 / tr(R + gamma I): mean-square stability (sufficient). */
  readonly meanSquare: number;
  /** 2 / (3 tr(R + gamma I)): mean-square stability for Gaussian input. */
  readonly gaussian: number;
}

/** The three LMS bounds for an L-tap filter on a reference with this lambda_max and tr R. */
export function lmsStepBounds(lambdaMax: number, traceR: number, taps: number, leak: number): LmsStepBounds {
  const trace = traceR + taps * leak;
  return { mean: lmsStepBound(lambdaMax, leak), meanSquare: 2 / trace, gaussian: 2 / (3 * trace) };
}

export const NLMS_STEP_BOUND = 2;
/** pbfdaf, either form: measured (test/dsp/fdaf.test.ts), not derived. */
export const PBFDAF_STEP_BOUND = 1;
