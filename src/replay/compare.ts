import type { Summary } from './summary.js';

/**
 * How a policy did over a recording, from the clean path's point of view (the stream the rig
 * passes on), and tapwarden's rule for calling one policy worse than another. The thresholds are
 * tapwarden's own choice, not a standard; README.md ("Comparing policies") states them.
 */

export interface Burst {
  startSeconds: number;
  seconds: number;
  /** The highest clean-path error power in the burst, dB re full scale. */
  peakErrorPowerDb: number;
}

export interface PolicyFigures {
  name: string;
  /** Share of windows in which the clean path cancelled at least minCancellationDb with no clipping. */
  healthyShare: number;
  cleanCancellationMedianDb: number;
  cleanCancellationP5Db: number;
  /** The longest run of unhealthy clean-path windows. */
  worstBurst: Burst | null;
  handoffsAccepted: number;
  handoffsRejected: number;
  saturations: { adaptive: number; clean: number };
  maxAbsWeightMean: number;
  verdict: Verdict;
}

export type Verdict = 'ok' | 'marginal' | 'poor';

export const RULE = {
  /** ok needs: */
  okHealthyShare: 0.9,
  okLongestBurstSeconds: 2,
  /** poor below: */
  poorHealthyShare: 0.75,
  poorLongestBurstSeconds: 10,
  /** A candidate is worse than the baseline if it loses more than: */
  healthyShareLoss: 0.02,
  medianLossDb: 1,
  p5LossDb: 3,
  burstGrowth: 0.1,
} as const;

/** The q-quantile (0..1) by the nearest-rank method. */
export function quantile(values: readonly number[], q: number): number {
  if (values.length === 0) return NaN;
  const s = [...values].sort((a, b) => a - b);
  return s[Math.min(s.length - 1, Math.max(0, Math.ceil(q * s.length) - 1))]!;
}

export function figuresOf(s: Summary): PolicyFigures {
  const window = s.config.supervisor.windowSeconds;
  const threshold = s.config.supervisor.minCancellationDb;
  const healthy = s.series.map((p) => p.clean.cancellationDb >= threshold && p.clean.saturations === 0);
  let worst: Burst | null = null;
  let run: Burst | null = null;
  s.series.forEach((p, i) => {
    if (!healthy[i]) {
      run ??= { startSeconds: p.timeSeconds - window, seconds: 0, peakErrorPowerDb: -Infinity };
      run.seconds += window;
      run.peakErrorPowerDb = Math.max(run.peakErrorPowerDb, p.clean.errorPowerDb);
      if (worst === null || run.seconds > worst.seconds) worst = { ...run };
    } else run = null;
  });
  const cancellation = s.series.map((p) => p.clean.cancellationDb);
  const share = healthy.length ? healthy.filter(Boolean).length / healthy.length : 0;
  const longest = (worst as Burst | null)?.seconds ?? 0;
  const verdict: Verdict =
    share >= RULE.okHealthyShare && s.saturations.clean === 0 && longest <= RULE.okLongestBurstSeconds
      ? 'ok'
      : share < RULE.poorHealthyShare || longest > RULE.poorLongestBurstSeconds
        ? 'poor'
        : 'marginal';
  return {
    name: s.policy,
    healthyShare: share,
    cleanCancellationMedianDb: quantile(cancellation, 0.5),
    cleanCancellationP5Db: quantile(cancellation, 0.05),
    worstBurst: worst,
    handoffsAccepted: s.handoffs.accepted,
    handoffsRejected: s.handoffs.rejected,
    saturations: s.saturations,
    maxAbsWeightMean: s.series.reduce((m, p) => Math.max(m, Math.abs(p.adaptive.weightMean)), 0),
    verdict,
  };
}

/** The ways a candidate is worse than the baseline by RULE; empty when it is not. */
export function worseThan(candidate: PolicyFigures, baseline: PolicyFigures, windowSeconds: number): string[] {
  const reasons: string[] = [];
  if (candidate.healthyShare < baseline.healthyShare - RULE.healthyShareLoss) {
    reasons.push(`healthy ${(100 * candidate.healthyShare).toFixed(1)} % vs ${(100 * baseline.healthyShare).toFixed(1)} %`);
  }
  if (candidate.cleanCancellationMedianDb < baseline.cleanCancellationMedianDb - RULE.medianLossDb) {
    reasons.push(`median cancellation ${candidate.cleanCancellationMedianDb.toFixed(1)} dB vs ${baseline.cleanCancellationMedianDb.toFixed(1)} dB`);
  }
  if (candidate.cleanCancellationP5Db < baseline.cleanCancellationP5Db - RULE.p5LossDb) {
    reasons.push(`5th percentile ${candidate.cleanCancellationP5Db.toFixed(1)} dB vs ${baseline.cleanCancellationP5Db.toFixed(1)} dB`);
  }
  const cb = candidate.worstBurst?.seconds ?? 0;
  const bb = baseline.worstBurst?.seconds ?? 0;
  if (cb > bb + Math.max(windowSeconds, RULE.burstGrowth * bb)) reasons.push(`worst burst ${cb.toFixed(1)} s vs ${bb.toFixed(1)} s`);
  if (candidate.saturations.clean > baseline.saturations.clean) {
    reasons.push(`clean-path saturations ${candidate.saturations.clean} vs ${baseline.saturations.clean}`);
  }
  return reasons;
}

/** The comparison table as text. */
export function formatComparison(rows: readonly PolicyFigures[], gate: { baseline: string; worse: Map<string, string[]> } | null): string {
  const head = ['policy', 'healthy', 'median', 'p5', 'worst burst', 'handoffs', 'refused', 'satur.', 'max|mean|', 'verdict'];
  const body = rows.map((r) => {
    const b = r.worstBurst;
    const worse = gate?.worse.get(r.name);
    return [
      r.name,
      `${(100 * r.healthyShare).toFixed(1)} %`,
      `${r.cleanCancellationMedianDb.toFixed(1)} dB`,
      `${r.cleanCancellationP5Db.toFixed(1)} dB`,
      b ? `${b.seconds.toFixed(1)} s at ${b.peakErrorPowerDb.toFixed(0)} dB` : 'none',
      String(r.handoffsAccepted),
      String(r.handoffsRejected),
      String(r.saturations.adaptive + r.saturations.clean),
      r.maxAbsWeightMean.toFixed(4),
      r.verdict + (gate === null ? '' : r.name === gate.baseline ? ' (baseline)' : worse && worse.length ? ` WORSE: ${worse.join('; ')}` : ' not worse'),
    ];
  });
  const widths = head.map((h, i) => Math.max(h.length, ...body.map((row) => row[i]!.length)));
  return [head, ...body].map((row) => row.map((c, i) => (i === row.length - 1 ? c : c.padEnd(widths[i]!))).join('  ')).join('\n');
}
