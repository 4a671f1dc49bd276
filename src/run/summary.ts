import type { DriftForecast } from '../analysis/forecast.js';
import { DbHistogram } from '../analysis/histogram.js';
import type { PathFigures } from '../engine/dualPath.js';
import { CRITERIA, type Criterion, type Outcome } from '../engine/supervisor.js';
import type { DecisionRecord, RunEvent } from './record.js';
import type { RunSink } from './run.js';
import { SeriesDecimator } from './series.js';

/**
 * The bounded summary of a run: counts, quantiles from fixed histograms, the clean path's
 * healthy share and worst burst judged against one given threshold, a decimated series, the
 * first and last events, and the drift forecast. Its memory does not grow with the run.
 */

/** The threshold the clean path is judged against, and where it came from. */
export interface Judgement {
  readonly minCancellationDb: number;
  /** Which configuration the threshold is from (a policy name, a file, "default"). */
  readonly source: string;
}

export interface Burst {
  startSeconds: number;
  seconds: number;
  /** The highest clean-path error power in the burst, dB re full scale. */
  peakErrorPowerDb: number;
}

export interface SeriesPoint {
  timeSeconds: number;
  /** For a decimated pair: the column's best outcome on its first entry, its worst on the second. */
  outcome: Outcome;
  referencePowerDb: number;
  desiredPowerDb: number;
  nonFiniteSamples: number;
  outOfRangeSamples: number;
  adaptive: PathFigures;
  clean: PathFigures;
  forecast: { limitEtaSeconds: number | null; meanBoundEtaSeconds: number | null };
}

export interface SummaryFigures {
  windows: number;
  handoffs: {
    accepted: number;
    rejected: number;
    pending: number;
    idle: number;
    rollbacks: number;
    rejectedBy: Record<Criterion, number>;
  };
  /** The clean path against the judgement's threshold. */
  judgement: Judgement & {
    /** Share of windows in which the clean path cancelled at least the threshold. */
    healthyShare: number;
    /** The longest run of unhealthy windows after the first handoff (the whole run if there was none). */
    worstBurst: Burst | null;
    /** When the clean path first took weights from the adaptive path; null if it never did. */
    timeToFirstHandoffSeconds: number | null;
  };
  /** Cancellation quantiles over windows (nearest rank, 0.01 dB). */
  cancellation: {
    clean: { medianDb: number | null; p5Db: number | null; lastQuarterMedianDb: number | null };
    adaptive: { medianDb: number | null; p5Db: number | null };
  };
  maxAbsWeightMean: number;
  /** Non-idle decisions: the first EVENT_HEAD and the last EVENT_TAIL (decisions.ndjson has all). */
  events: DecisionRecord[];
  eventsOmitted: number;
  /** One entry per window up to 2 x SERIES_COLUMNS windows, then min/max pairs per column. */
  series: SeriesPoint[];
  seriesWindowsPerColumn: number;
  drift: {
    /** The forecast at the end of the run. */
    final: DriftForecast | null;
    /** The end of the first window in which an adaptive weight store clipped (or sat at the limit), or null. */
    firstLimitSeconds: number | null;
    /** When |weight mean| first exceeded its bound, or null. */
    firstMeanBoundSeconds: number | null;
  };
}

export const SERIES_COLUMNS = 1000;
export const EVENT_HEAD = 500;
export const EVENT_TAIL = 200;

const OUTCOME_RANK: Record<Outcome, number> = { accepted: 0, pending: 1, idle: 2, rejected: 3 };
const OUTCOMES: readonly Outcome[] = ['accepted', 'pending', 'idle', 'rejected'];
const PATH_FIELDS = ['errorPowerDb', 'cancellationDb', 'weightMean', 'weightNorm', 'maxAbsWeight', 'minWeight', 'maxWeight', 'weightSaturations', 'signalSaturations'] as const;
const FIELDS = [
  'outcome',
  'referencePowerDb',
  'desiredPowerDb',
  'nonFiniteSamples',
  'outOfRangeSamples',
  ...PATH_FIELDS.map((f) => `adaptive.${f}`),
  ...PATH_FIELDS.map((f) => `clean.${f}`),
  'limitEtaSeconds',
  'meanBoundEtaSeconds',
];
const etaIn = (v: number | null): number => (v === null ? Infinity : v);
const etaOut = (v: number): number | null => (Number.isFinite(v) ? v : null);

export class SummarySink implements RunSink {
  private windows = 0;
  private readonly counts: SummaryFigures['handoffs'] = {
    accepted: 0,
    rejected: 0,
    pending: 0,
    idle: 0,
    rollbacks: 0,
    rejectedBy: Object.fromEntries(CRITERIA.map((c) => [c, 0])) as Record<Criterion, number>,
  };
  private readonly cleanHist = new DbHistogram();
  private readonly adaptiveHist = new DbHistogram();
  private readonly lastQuarterHist = new DbHistogram();
  private healthy = 0;
  private firstHandoff: number | null = null;
  private run: Burst | null = null;
  private worstAfter: Burst | null = null;
  private worstOverall: Burst | null = null;
  private maxAbsMean = 0;
  private readonly head: DecisionRecord[] = [];
  private readonly tail: DecisionRecord[] = [];
  private tailAt = 0;
  private nonIdle = 0;
  private readonly series = new SeriesDecimator(FIELDS, SERIES_COLUMNS);
  private readonly values = new Float64Array(FIELDS.length);
  private lastForecast: DriftForecast | null = null;
  private firstLimitSeconds: number | null = null;
  private firstMeanBoundSeconds: number | null = null;

  constructor(
    private readonly opts: {
      readonly windowSeconds: number;
      readonly judge: Judgement;
      /** The arithmetic's largest |w| and the supervisor's bound on |weight mean|. */
      readonly weightLimit: number;
      readonly meanBound: number;
      /** Windows the run will have, when known (for the last quarter's median). */
      readonly expectedWindows: number | null;
    },
  ) {}

  onEvent(e: RunEvent): void {
    if (e.type === 'handoff' && (e.reason === 'supervisor' || e.reason === 'forced' || e.reason === 'restored') && this.firstHandoff === null) {
      this.firstHandoff = e.timeSeconds;
    }
  }

  onRecord(r: DecisionRecord): void {
    const c = this.counts;
    c[r.outcome]++;
    if (r.rollback) c.rollbacks++;
    if (r.outcome === 'rejected') for (const k of r.failed) c.rejectedBy[k]++;
    this.windows++;
    this.cleanHist.add(r.clean.cancellationDb);
    this.adaptiveHist.add(r.adaptive.cancellationDb);
    const expected = this.opts.expectedWindows;
    if (expected !== null && r.window >= Math.floor((3 * expected) / 4)) this.lastQuarterHist.add(r.clean.cancellationDb);
    this.judge(r);
    this.maxAbsMean = Math.max(this.maxAbsMean, Math.abs(r.adaptive.weightMean));
    this.lastForecast = r.forecast;
    // A weight store clipped, or one sits at the limit: the limit was reached.
    if (this.firstLimitSeconds === null && (r.adaptive.weightSaturations > 0 || r.adaptive.maxAbsWeight >= this.opts.weightLimit)) this.firstLimitSeconds = r.timeSeconds;
    if (this.firstMeanBoundSeconds === null && Math.abs(r.adaptive.weightMean) > this.opts.meanBound) this.firstMeanBoundSeconds = r.timeSeconds;
    if (r.outcome !== 'idle') this.keepEvent(r);
    this.pushSeries(r);
  }

  private judge(r: DecisionRecord): void {
    const ok = r.clean.cancellationDb >= this.opts.judge.minCancellationDb;
    if (ok) {
      this.healthy++;
      this.run = null;
      return;
    }
    const w = this.opts.windowSeconds;
    this.run ??= { startSeconds: r.timeSeconds - w, seconds: 0, peakErrorPowerDb: -Infinity };
    this.run.seconds += w;
    this.run.peakErrorPowerDb = Math.max(this.run.peakErrorPowerDb, r.clean.errorPowerDb);
    if (this.worstOverall === null || this.run.seconds > this.worstOverall.seconds) this.worstOverall = { ...this.run };
    // After the first handoff only: the initial convergence is reported as timeToFirstHandoff.
    if (this.firstHandoff !== null && this.run.startSeconds >= this.firstHandoff - 1e-9) {
      if (this.worstAfter === null || this.run.seconds > this.worstAfter.seconds) this.worstAfter = { ...this.run };
    }
  }

  private keepEvent(r: DecisionRecord): void {
    this.nonIdle++;
    if (this.head.length < EVENT_HEAD) {
      this.head.push(r);
      return;
    }
    if (this.tail.length < EVENT_TAIL) this.tail.push(r);
    else {
      this.tail[this.tailAt] = r;
      this.tailAt = (this.tailAt + 1) % EVENT_TAIL;
    }
  }

  private pushSeries(r: DecisionRecord): void {
    const v = this.values;
    let i = 0;
    v[i++] = OUTCOME_RANK[r.outcome];
    v[i++] = r.referencePowerDb;
    v[i++] = r.desiredPowerDb;
    v[i++] = r.nonFiniteSamples;
    v[i++] = r.outOfRangeSamples;
    for (const p of [r.adaptive, r.clean]) for (const f of PATH_FIELDS) v[i++] = p[f];
    v[i++] = etaIn(r.forecast.limitEtaSeconds);
    v[i++] = etaIn(r.forecast.meanBoundEtaSeconds);
    this.series.push(r.timeSeconds, v);
  }

  figures(): SummaryFigures {
    const path = (v: Float64Array, at: number): PathFigures => {
      const out = {} as Record<(typeof PATH_FIELDS)[number], number>;
      PATH_FIELDS.forEach((f, k) => (out[f] = v[at + k]!));
      return out as PathFigures;
    };
    const series = this.series.entries((timeSeconds, v): SeriesPoint => ({
      timeSeconds,
      outcome: OUTCOMES[v[0]!]!,
      referencePowerDb: v[1]!,
      desiredPowerDb: v[2]!,
      nonFiniteSamples: v[3]!,
      outOfRangeSamples: v[4]!,
      adaptive: path(v, 5),
      clean: path(v, 5 + PATH_FIELDS.length),
      forecast: { limitEtaSeconds: etaOut(v[5 + 2 * PATH_FIELDS.length]!), meanBoundEtaSeconds: etaOut(v[6 + 2 * PATH_FIELDS.length]!) },
    }));
    const tail = [...this.tail.slice(this.tailAt), ...this.tail.slice(0, this.tailAt)];
    return {
      windows: this.windows,
      handoffs: this.counts,
      judgement: {
        ...this.opts.judge,
        healthyShare: this.windows > 0 ? this.healthy / this.windows : 0,
        worstBurst: this.firstHandoff === null ? this.worstOverall : this.worstAfter,
        timeToFirstHandoffSeconds: this.firstHandoff,
      },
      cancellation: {
        clean: { medianDb: this.cleanHist.quantile(0.5), p5Db: this.cleanHist.quantile(0.05), lastQuarterMedianDb: this.lastQuarterHist.quantile(0.5) },
        adaptive: { medianDb: this.adaptiveHist.quantile(0.5), p5Db: this.adaptiveHist.quantile(0.05) },
      },
      maxAbsWeightMean: this.maxAbsMean,
      events: [...this.head, ...tail],
      eventsOmitted: this.nonIdle - this.head.length - tail.length,
      series,
      seriesWindowsPerColumn: this.series.windowsPerColumn,
      drift: { final: this.lastForecast, firstLimitSeconds: this.firstLimitSeconds, firstMeanBoundSeconds: this.firstMeanBoundSeconds },
    };
  }
}
