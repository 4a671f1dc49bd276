import type { Burst, Judgement } from '../run/summary.js';
import type { Summary } from './summary.js';

/**
 * How a policy did over a recording, from the clean path's point of view (the stream the rig
 * passes on), and tapwarden's rule for calling one policy worse than another. Every policy in a
 * comparison is judged against one threshold (its summary's `judgement`), never its own. The
 * thresholds of the rule are tapwarden's own choice, not a standard; README.md ("Comparing
 * policies") states them.
 */

export interface PolicyFigures {
  name: string;
  /** The threshold the figures were judged against. */
  judgedAt: Judgement;
  /** Share of windows in which the clean path cancelled at least the judgement's threshold. */
  healthyShare: number;
  cleanCancellationMedianDb: number | null;
  cleanCancellationP5Db: number | null;
  /** The longest run of unhealthy clean-path windows after the first handoff. */
  worstBurst: Burst | null;
  /** The initial convergence, apart from the bursts: null if the clean path never took weights. */
  timeToFirstHandoffSeconds: number | null;
  handoffsAccepted: number;
  handoffsRejected: number;
  /** Clipped stores: adaptive weights (the drift symptom) and signals of both paths (a level problem). */
  saturations: { weights: number; signal: number };
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

/** How a summary is named in tables: its policy, with its channel when a run has several. */
export function labelsOf(summaries: readonly Summary[]): string[] {
  const multi = new Set(summaries.map((s) => s.channel)).size > 1;
  return summaries.map((s) => (multi ? `${s.policy}/ch${s.channel}` : s.policy));
}

/** The summary's figures, named `label` (the policy, or policy/ch<N> with several measurement channels). */
export function figuresOf(s: Summary, label = s.policy): PolicyFigures {
  const j = s.judgement;
  const longest = j.worstBurst?.seconds ?? 0;
  const weights = s.saturations.adaptive.weights;
  const verdict: Verdict =
    s.windows > 0 && j.healthyShare >= RULE.okHealthyShare && weights === 0 && longest <= RULE.okLongestBurstSeconds
      ? 'ok'
      : s.windows === 0 || j.healthyShare < RULE.poorHealthyShare || longest > RULE.poorLongestBurstSeconds
        ? 'poor'
        : 'marginal';
  return {
    name: label,
    judgedAt: { minCancellationDb: j.minCancellationDb, source: j.source },
    healthyShare: j.healthyShare,
    cleanCancellationMedianDb: s.cancellation.clean.medianDb,
    cleanCancellationP5Db: s.cancellation.clean.p5Db,
    worstBurst: j.worstBurst,
    timeToFirstHandoffSeconds: j.timeToFirstHandoffSeconds,
    handoffsAccepted: s.handoffs.accepted,
    handoffsRejected: s.handoffs.rejected,
    saturations: { weights, signal: s.saturations.adaptive.signal + s.saturations.clean.signal },
    maxAbsWeightMean: s.maxAbsWeightMean,
    verdict,
  };
}

const VERDICT_RANK: Record<Verdict, number> = { poor: 0, marginal: 1, ok: 2 };

/**
 * The worst of one policy's measurement channels: the lowest verdict, then the smallest healthy
 * share, then the lowest median cancellation (the channel a rig's weakest output comes from).
 */
export function worstIndex(rows: readonly Omit<PolicyFigures, 'name' | 'judgedAt'>[]): number {
  let worst = 0;
  const key = (f: (typeof rows)[number]) => [VERDICT_RANK[f.verdict], f.healthyShare, f.cleanCancellationMedianDb ?? -Infinity];
  for (let i = 1; i < rows.length; i++) {
    const a = key(rows[i]!);
    const b = key(rows[worst]!);
    const k = a.findIndex((v, j) => v !== b[j]);
    if (k >= 0 && a[k]! < b[k]!) worst = i;
  }
  return worst;
}

const lower = (a: number | null, b: number | null, by: number): boolean => (a ?? -Infinity) < (b ?? -Infinity) - by;

/** The ways a candidate is worse than the baseline by RULE; empty when it is not. */
export function worseThan(candidate: PolicyFigures, baseline: PolicyFigures, windowSeconds: number): string[] {
  const reasons: string[] = [];
  const db = (v: number | null) => (v === null ? 'n/a' : `${v.toFixed(1)} dB`);
  if (candidate.healthyShare < baseline.healthyShare - RULE.healthyShareLoss) {
    reasons.push(`healthy ${(100 * candidate.healthyShare).toFixed(1)} % vs ${(100 * baseline.healthyShare).toFixed(1)} %`);
  }
  if (lower(candidate.cleanCancellationMedianDb, baseline.cleanCancellationMedianDb, RULE.medianLossDb)) {
    reasons.push(`median cancellation ${db(candidate.cleanCancellationMedianDb)} vs ${db(baseline.cleanCancellationMedianDb)}`);
  }
  if (lower(candidate.cleanCancellationP5Db, baseline.cleanCancellationP5Db, RULE.p5LossDb)) {
    reasons.push(`5th percentile ${db(candidate.cleanCancellationP5Db)} vs ${db(baseline.cleanCancellationP5Db)}`);
  }
  const cb = candidate.worstBurst?.seconds ?? 0;
  const bb = baseline.worstBurst?.seconds ?? 0;
  if (cb > bb + Math.max(windowSeconds, RULE.burstGrowth * bb)) reasons.push(`worst burst ${cb.toFixed(1)} s vs ${bb.toFixed(1)} s`);
  if (candidate.saturations.weights > baseline.saturations.weights) {
    reasons.push(`adaptive weight saturations ${candidate.saturations.weights} vs ${baseline.saturations.weights}`);
  }
  return reasons;
}

/** The comparison table as text. */
export function formatComparison(rows: readonly PolicyFigures[], gate: { baseline: string; worse: Map<string, string[]> } | null): string {
  const head = ['policy', 'healthy', 'median', 'p5', 'worst burst', 'first handoff', 'handoffs', 'refused', 'w.sat', 's.sat', 'max|mean|', 'verdict'];
  const db = (v: number | null) => (v === null ? 'n/a' : `${v.toFixed(1)} dB`);
  const body = rows.map((r) => {
    const b = r.worstBurst;
    const worse = gate?.worse.get(r.name);
    return [
      r.name,
      `${(100 * r.healthyShare).toFixed(1)} %`,
      db(r.cleanCancellationMedianDb),
      db(r.cleanCancellationP5Db),
      b ? `${b.seconds.toFixed(1)} s at ${b.peakErrorPowerDb.toFixed(0)} dB` : 'none',
      r.timeToFirstHandoffSeconds === null ? 'never' : `${r.timeToFirstHandoffSeconds.toFixed(1)} s`,
      String(r.handoffsAccepted),
      String(r.handoffsRejected),
      String(r.saturations.weights),
      String(r.saturations.signal),
      r.maxAbsWeightMean.toFixed(4),
      r.verdict + (gate === null ? '' : worse === undefined ? ' (baseline)' : worse.length ? ` WORSE: ${worse.join('; ')}` : ' not worse'),
    ];
  });
  const widths = head.map((h, i) => Math.max(h.length, ...body.map((row) => row[i]!.length)));
  const table = [head, ...body].map((row) => row.map((c, i) => (i === row.length - 1 ? c : c.padEnd(widths[i]!))).join('  ')).join('\n');
  const j = rows[0]?.judgedAt;
  return j ? `${table}\njudged at  clean-path cancellation >= ${j.minCancellationDb} dB (from ${j.source}) for every policy` : table;
}
