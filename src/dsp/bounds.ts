/**
 * Step-size bounds. LMS (w += mu e x) is stable in the mean for 0 < mu < 2 / (lambda_max + gamma)
 * (Haykin, Adaptive Filter Theory, 4th ed., ch. 5, with the leak's gamma I added to R);
 * NLMS for 0 < mu < 2 whatever the input.
 */
export function lmsStepBound(lambdaMax: number, leak: number): number {
  return 2 / (lambdaMax + leak);
}

export const NLMS_STEP_BOUND = 2;
