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
  sampleRate: number;
  samples: number;
  durationSeconds: number;
  taps: number;
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
  outputs: { clean: string; adaptive: string; clippedSamples: number };
  elapsedSeconds: number;
  realtimeFactor: number;
}

/** Collects the engine's window reports into the summary's counts, events and series. */
export class SummaryCollector implements EngineListener {
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
    this.series.push({
      timeSeconds: r.timeSeconds,
      outcome: dec.outcome,
      referencePowerDb: r.referencePowerDb,
      desiredPowerDb: r.desiredPowerDb,
      nonFiniteSamples: r.nonFiniteSamples,
      adaptive: r.adaptive,
      clean: r.clean,
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
    `speed       ${s.realtimeFactor.toFixed(1)}x real time`,
    `written     ${outDir}/summary.json, clean.wav, adaptive.wav`,
  ];
  return lines.join('\n');
}
