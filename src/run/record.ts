import type { DriftForecast } from '../analysis/forecast.js';
import type { HandoffReason, PathFigures } from '../engine/dualPath.js';
import type { Criterion, Outcome } from '../engine/supervisor.js';

/**
 * The one decision record: made once per window by a run and handed, as the same object, to
 * every sink (decision log, summary, metrics, feed, service log, status). No sink reshapes it.
 */
export interface DecisionRecord {
  readonly type: 'decision';
  /** Measurement channel this record is about (input.desiredChannel). */
  readonly channel: number;
  /** Window index since the run started. */
  readonly window: number;
  /** End of the window: sample index (exclusive) and seconds since the run started. */
  readonly sample: number;
  readonly timeSeconds: number;
  readonly outcome: Outcome;
  /** The criteria the window failed, in CRITERIA order. */
  readonly failed: readonly Criterion[];
  /** The adaptive path restarted from the clean weights after this window. */
  readonly rollback: boolean;
  /** Consecutive passing and failing windows after this one. */
  readonly passes: number;
  readonly failures: number;
  /** The clean path's weights version after this window's decision. */
  readonly cleanVersion: number;
  readonly referencePowerDb: number;
  readonly desiredPowerDb: number;
  readonly nonFiniteSamples: number;
  readonly outOfRangeSamples: number;
  readonly adaptive: PathFigures;
  readonly clean: PathFigures;
  /** The drift forecast for the adaptive path made at the end of this window. */
  readonly forecast: DriftForecast;
}

/** Something that happened between windows: the clean path took weights, or an operator acted. */
export type RunEvent =
  | {
      readonly type: 'handoff';
      readonly channel: number;
      readonly sample: number;
      readonly timeSeconds: number;
      readonly version: number;
      readonly reason: HandoffReason;
    }
  | {
      readonly type: 'rollback';
      readonly channel: number;
      readonly sample: number;
      readonly timeSeconds: number;
      readonly reason: 'supervisor' | 'forced';
    }
  | {
      /** Live settings took effect (POST /api/control/settings): every changed key, old and new. */
      readonly type: 'settings';
      readonly channel: number;
      readonly sample: number;
      readonly timeSeconds: number;
      readonly changes: Readonly<Record<string, { from: unknown; to: unknown }>>;
    };
