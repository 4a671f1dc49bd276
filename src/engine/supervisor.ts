/**
 * The handoff policy: a pure function from the last window's figures and the running counts to
 * a decision. It follows the two-path transfer rule (Ochiai, Araseki & Ogihara, IEEE Trans.
 * Commun. COM-25(6), 1977): the output path takes the adapting path's weights only after the
 * adapting path has been both healthy and better for K consecutive windows.
 */

/** Why a window cannot lead to a handoff. */
export type Criterion =
  /** The adaptive path cancels less than minCancellationDb. */
  | 'cancellation'
  /** |mean of the adaptive weights| exceeds maxWeightMean. */
  | 'weightMean'
  /** An adaptive weight store clipped during the window (the drift symptom). */
  | 'saturation'
  /** The window held non-finite input samples. */
  | 'nonFinite'
  /** The window held finite input samples beyond the accepted range (clamped). */
  | 'outOfRange'
  /** The adaptive error power is not below the clean path's by marginDb. */
  | 'margin'
  /** The reference is quieter than minReferencePowerDb: nothing to learn from. */
  | 'referenceLevel';

export const CRITERIA: readonly Criterion[] = [
  'cancellation',
  'weightMean',
  'saturation',
  'nonFinite',
  'outOfRange',
  'margin',
  'referenceLevel',
];

/** Criteria that mean the adaptive path is unhealthy (they count toward rollback). */
const HEALTH: ReadonlySet<Criterion> = new Set<Criterion>(['cancellation', 'weightMean', 'saturation', 'nonFinite', 'outOfRange']);

export interface Policy {
  readonly minCancellationDb: number;
  readonly maxWeightMean: number;
  readonly marginDb: number;
  readonly passesRequired: number;
  /** Restart the adaptive path from the clean weights after this many unhealthy windows. */
  readonly rollbackAfter: number | null;
  readonly minReferencePowerDb: number | null;
}

/** The figures the policy reads; a subset of the engine's window report. */
export interface PolicyInput {
  readonly referencePowerDb: number;
  readonly adaptiveErrorPowerDb: number;
  readonly adaptiveCancellationDb: number;
  readonly cleanErrorPowerDb: number;
  readonly adaptiveWeightMean: number;
  /** Adaptive weight stores that clipped in the window (signal clipping is a level problem, not a health one). */
  readonly adaptiveWeightSaturations: number;
  readonly nonFiniteSamples: number;
  readonly outOfRangeSamples: number;
}

export interface SupervisorState {
  /** Consecutive windows that passed every criterion. */
  readonly passes: number;
  /** Consecutive windows that failed a health criterion. */
  readonly failures: number;
}

/**
 * accepted: the weights go to the clean path now. pending: every check passed but fewer than
 * passesRequired windows in a row. idle: healthy, but no gain to hand over (margin) or no
 * reference to learn from. rejected: a health check failed.
 */
export type Outcome = 'accepted' | 'pending' | 'idle' | 'rejected';

export interface Decision {
  readonly outcome: Outcome;
  readonly failed: readonly Criterion[];
  readonly passes: number;
  readonly failures: number;
  /** The adaptive path restarts from the clean path's weights. */
  readonly rollback: boolean;
}

export const INITIAL_STATE: SupervisorState = { passes: 0, failures: 0 };

/** The criteria the window fails, in CRITERIA order. */
export function failedCriteria(input: PolicyInput, policy: Policy): Criterion[] {
  const failed: Criterion[] = [];
  if (!(input.adaptiveCancellationDb >= policy.minCancellationDb)) failed.push('cancellation');
  if (!(Math.abs(input.adaptiveWeightMean) <= policy.maxWeightMean)) failed.push('weightMean');
  if (input.adaptiveWeightSaturations > 0) failed.push('saturation');
  if (input.nonFiniteSamples > 0) failed.push('nonFinite');
  if (input.outOfRangeSamples > 0) failed.push('outOfRange');
  if (!(input.adaptiveErrorPowerDb <= input.cleanErrorPowerDb - policy.marginDb)) failed.push('margin');
  if (policy.minReferencePowerDb !== null && !(input.referencePowerDb >= policy.minReferencePowerDb)) {
    failed.push('referenceLevel');
  }
  return failed;
}

/**
 * One window's decision. `handoffsFrozen` holds an otherwise accepted handoff as pending
 * (an operator's choice, not a failure).
 */
export function decide(
  state: SupervisorState,
  input: PolicyInput,
  policy: Policy,
  handoffsFrozen = false,
): { decision: Decision; state: SupervisorState } {
  const failed = failedCriteria(input, policy);
  const unhealthy = failed.some((c) => HEALTH.has(c));
  if (unhealthy) {
    const failures = state.failures + 1;
    const rollback = policy.rollbackAfter !== null && failures >= policy.rollbackAfter;
    const next = { passes: 0, failures: rollback ? 0 : failures };
    return { decision: { outcome: 'rejected', failed, passes: 0, failures, rollback }, state: next };
  }
  if (failed.length > 0) {
    return {
      decision: { outcome: 'idle', failed, passes: 0, failures: 0, rollback: false },
      state: { passes: 0, failures: 0 },
    };
  }
  const passes = state.passes + 1;
  if (passes >= policy.passesRequired && !handoffsFrozen) {
    return {
      decision: { outcome: 'accepted', failed, passes, failures: 0, rollback: false },
      state: { passes: 0, failures: 0 },
    };
  }
  return {
    decision: { outcome: 'pending', failed, passes, failures: 0, rollback: false },
    state: { passes, failures: 0 },
  };
}
