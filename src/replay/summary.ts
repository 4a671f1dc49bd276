import { DriftForecaster, trendPoints, type DriftForecast } from '../analysis/forecast.js';
import type { Config } from '../config/schema.js';
import type { EngineListener, PathFigures, WindowReport } from '../engine/dualPath.js';
import { CRITERIA, type Criterion, type Outcome } from '../engine/supervisor.js';

export interface SeriesPoint {
  timeSeconds: number;
  outcome: Outcome;
  referencePowerDb: number;
  desiredPowerDb: number;
  nonFiniteSamples: number;
  adaptive: PathFigures;
  clean: PathFigures;
  /** The drift forecast for the adaptive path made at the end of this window. */
  forecast: { limitEtaSeconds: number | null; meanBoundEtaSeconds: number | null };
}

export interface DecisionEvent {
  sample: number;
  timeSeconds: number;
  outcome: Outcome;
  accepted: boolean;
  failed: Criterion[];
  rollback: boolean;
  passes: number;
  failures: number;
  figures: {
    referencePowerDb: number;
    desiredPowerDb: number;
    adaptiveErrorPowerDb: number;
    adaptiveCancellationDb: number;
    cleanErrorPowerDb: number;
    cleanCancellationDb: number;
    adaptiveWeightMean: number;
    adaptiveMaxAbsWeight: number;
    adaptiveSaturations: number;
    nonFiniteSamples: number;
  };
}

export interface Summary {
  tool: string;
  recording: string;
  /** The policy's name (its config file's base name), or "default". */
  policy: string;
  sampleRate: number;
  samples: number;
  durationSeconds: number;
  taps: number;
  /** Output samples lag input samples by this much (pbfdaf: one block). */
  latencySamples: number;
  config: Config;
  warnings: string[];
  handoffs: {
    accepted: number;
    rejected: number;
    pending: number;
    idle: number;
    rollbacks: number;
    rejectedBy: Record<Criterion, number>;
  };
  events: DecisionEvent[];
  series: SeriesPoint[];
  weights: { adaptive: number[]; clean: number[]; cleanVersion: number };
  saturations: { adaptive: number; clean: number };
  nonFiniteSamples: number;
  /** The arithmetic's largest |w| and the supervisor's bound on |weight mean|. */
  limits: { weight: number; weightMean: number };
  drift: {
    /** The forecast at the end of the recording. */
    final: DriftForecast;
    /** When max |w| first reached the weight limit (a tap saturated), or null. */
    firstLimitSeconds: number | null;
    /** When |weight mean| first exceeded its bound, or null. */
    firstMeanBoundSeconds: number | null;
  };
  outputs: { clean: string; adaptive: string; clippedSamples: number };
  elapsedSeconds: number;
  realtimeFactor: number;
}

/** Collects the engine's window reports into the summary's counts, events, series and drift forecast. */
export class SummaryCollector implements EngineListener {
  readonly limits: Summary['limits'];
  private readonly forecaster: DriftForecaster;
  private lastForecast: DriftForecast | null = null;
  private firstLimitSeconds: number | null = null;
  private firstMeanBoundSeconds: number | null = null;

  constructor(config: Config, weightLimit: number) {
    this.limits = { weight: weightLimit, weightMean: config.supervisor.maxWeightMean };
    this.forecaster = new DriftForecaster(trendPoints(config.supervisor.windowSeconds));
  }

  drift(): Summary['drift'] {
    return {
      final: this.lastForecast ?? this.forecaster.forecast(this.limits.weight, this.limits.weightMean),
      firstLimitSeconds: this.firstLimitSeconds,
      firstMeanBoundSeconds: this.firstMeanBoundSeconds,
    };
  }

  readonly events: DecisionEvent[] = [];
  readonly series: SeriesPoint[] = [];
  readonly counts: Summary['handoffs'] = {
    accepted: 0,
    rejected: 0,
    pending: 0,
    idle: 0,
    rollbacks: 0,
    rejectedBy: Object.fromEntries(CRITERIA.map((c) => [c, 0])) as Record<Criterion, number>,
  };

  onWindow(r: WindowReport): void {
    const { decision: dec } = r;
    this.counts[dec.outcome]++;
    if (dec.rollback) this.counts.rollbacks++;
    if (dec.outcome === 'rejected') for (const c of dec.failed) this.counts.rejectedBy[c]++;
    const a = r.adaptive;
    this.forecaster.push(r.timeSeconds, a.weightMean, a.minWeight, a.maxWeight);
    const f = this.forecaster.forecast(this.limits.weight, this.limits.weightMean);
    this.lastForecast = f;
    if (this.firstLimitSeconds === null && a.maxAbsWeight >= this.limits.weight) this.firstLimitSeconds = r.timeSeconds;
    if (this.firstMeanBoundSeconds === null && Math.abs(a.weightMean) > this.limits.weightMean) this.firstMeanBoundSeconds = r.timeSeconds;
    this.series.push({
      timeSeconds: r.timeSeconds,
      outcome: dec.outcome,
      referencePowerDb: r.referencePowerDb,
      desiredPowerDb: r.desiredPowerDb,
      nonFiniteSamples: r.nonFiniteSamples,
      adaptive: r.adaptive,
      clean: r.clean,
      forecast: { limitEtaSeconds: f.limitEtaSeconds, meanBoundEtaSeconds: f.meanBoundEtaSeconds },
    });
    if (dec.outcome === 'idle') return;
    this.events.push({
      sample: r.endSample,
      timeSeconds: r.timeSeconds,
      outcome: dec.outcome,
      accepted: dec.outcome === 'accepted',
      failed: [...dec.failed],
      rollback: dec.rollback,
      passes: dec.passes,
      failures: dec.failures,
      figures: {
        referencePowerDb: r.referencePowerDb,
        desiredPowerDb: r.desiredPowerDb,
        adaptiveErrorPowerDb: r.adaptive.errorPowerDb,
        adaptiveCancellationDb: r.adaptive.cancellationDb,
        cleanErrorPowerDb: r.clean.errorPowerDb,
        cleanCancellationDb: r.clean.cancellationDb,
        adaptiveWeightMean: r.adaptive.weightMean,
        adaptiveMaxAbsWeight: r.adaptive.maxAbsWeight,
        adaptiveSaturations: r.adaptive.saturations,
        nonFiniteSamples: r.nonFiniteSamples,
      },
    });
  }
}

const fmtDb = (v: number): string => `${v.toFixed(1)} dB`;

/** One line on the weights' drift: when a limit was reached, or when it will be. */
export function describeDrift(s: Summary): string {
  const d = s.drift;
  if (d.firstLimitSeconds !== null) return `a tap reached the weight limit ${s.limits.weight.toPrecision(3)} at ${d.firstLimitSeconds.toFixed(1)} s`;
  const eta = d.final.limitEtaSeconds;
  const mean = d.final.meanBoundEtaSeconds;
  const parts = [eta === null ? 'no drift toward the weight limit' : `a tap reaches the weight limit in ~${formatSeconds(eta)} at the current drift`];
  if (d.firstMeanBoundSeconds !== null) parts.push(`|weight mean| passed its bound at ${d.firstMeanBoundSeconds.toFixed(1)} s`);
  else if (mean !== null) parts.push(`|weight mean| reaches its bound in ~${formatSeconds(mean)}`);
  return parts.join('; ');
}

export function formatSeconds(s: number): string {
  if (s < 120) return `${s.toFixed(0)} s`;
  if (s < 7200) return `${(s / 60).toFixed(0)} min`;
  if (s < 172800) return `${(s / 3600).toFixed(1)} h`;
  return `${(s / 86400).toFixed(0)} days`;
}

function median(xs: number[]): number {
  if (xs.length === 0) return NaN;
  const s = [...xs].sort((a, b) => a - b);
  return s[Math.floor(s.length / 2)]!;
}

/** A few lines for a person: what ran, what the supervisor did, how well the output cancels. */
export function formatSummary(s: Summary, outDir: string): string {
  const c = s.config.filter;
  const lastQuarter = s.series.slice(Math.floor((s.series.length * 3) / 4));
  const h = s.handoffs;
  const rejectedBy = Object.entries(h.rejectedBy)
    .filter(([, n]) => n > 0)
    .map(([k, n]) => `${k} ${n}`)
    .join(', ');
  const lines = [
    `recording   ${s.recording}: ${s.durationSeconds.toFixed(1)} s at ${s.sampleRate} Hz`,
    `filter      ${c.algorithm} ${c.taps} taps, step ${c.step}, ${c.arithmetic}/${c.rounding}` +
      (c.leak > 0 ? `, leak ${c.leak}` : '') +
      (c.leakShift !== null ? `, leakShift ${c.leakShift}` : '') +
      (c.noiseInjectionDb !== null ? `, noise ${c.noiseInjectionDb} dB` : ''),
    `handoffs    ${h.accepted} accepted, ${h.rejected} rejected${rejectedBy ? ` (${rejectedBy})` : ''}, ${h.rollbacks} rollbacks`,
    `clean path  cancellation median ${fmtDb(median(s.series.map((p) => p.clean.cancellationDb)))}, last quarter ${fmtDb(median(lastQuarter.map((p) => p.clean.cancellationDb)))}`,
    `saturations adaptive ${s.saturations.adaptive}, clean ${s.saturations.clean}; non-finite input samples ${s.nonFiniteSamples}`,
    `drift       ${describeDrift(s)}`,
    `speed       ${s.realtimeFactor.toFixed(1)}x real time`,
    `written     ${outDir}/summary.json, clean.wav, adaptive.wav, report.html`,
  ];
  return lines.join('\n');
}
