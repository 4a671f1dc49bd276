/**
 * Drift forecast: when will an adaptive tap reach the arithmetic's limit? Each tap's own trend is
 * fitted by least squares (taps need not move together: drift runs along whatever direction the
 * input leaves unexcited), the tap that meets the limit first gives the forecast, and the slopes'
 * standard errors give its uncertainty. Pure arithmetic, fed one point per window, O(taps) memory.
 *
 * The trend covers a horizon that grows with the run: at window m (counted since the last
 * restart), from checkpoint 2^(j-1) where 2^j <= m < 2^(j+1), i.e. the latest 25-50 % of the run
 * is left out and the early convergence with it; beyond MAX_HORIZON_SECONDS the checkpoints come
 * every half of that horizon instead. A rollback, reset or restore moves the weights at once and
 * restarts the fit.
 */

export interface DriftForecast {
  /** Seconds from the last point until a tap reaches the arithmetic's limit; null if none is drifting toward it. */
  limitEtaSeconds: number | null;
  /**
   * The same with every drifting tap's slope raised (low) or lowered (high) by two standard
   * errors (high is null when the lowered slope reaches zero: no upper bound).
   */
  limitEtaLowSeconds: number | null;
  limitEtaHighSeconds: number | null;
  /** The tap that reaches the limit first (0-based), or null. */
  limitTap: number | null;
  /** Seconds until |weight mean| reaches the supervisor's bound; null if not rising toward it. */
  meanBoundEtaSeconds: number | null;
  /** Trend of the weight mean, full scale per second (signed). */
  meanSlopePerSecond: number;
  /** Seconds of history the trend was fitted over. */
  horizonSeconds: number;
}

/** A slope counts as drift only when it stands out of its scatter by this many standard errors. */
const SIGNIFICANCE = 3;
/** The uncertainty interval: slopes +- this many standard errors. */
const INTERVAL = 2;
/** The longest history a trend is fitted over. */
export const MAX_HORIZON_SECONDS = 1200;
/**
 * No forecast reaches further ahead than this many times the history it was fitted on: beyond
 * that a straight line says nothing (a float filter's taps moving with the signal would
 * otherwise "reach" a limit of 1000 in hours).
 */
export const MAX_EXTRAPOLATION = 10;

/** Least-squares sums over (t, v) for many series sharing the same times. */
class TrendSums {
  n = 0;
  /** The first and latest time pushed. */
  first = 0;
  last = 0;
  st = 0;
  stt = 0;
  readonly sv: Float64Array;
  readonly stv: Float64Array;
  readonly svv: Float64Array;

  constructor(series: number) {
    this.sv = new Float64Array(series);
    this.stv = new Float64Array(series);
    this.svv = new Float64Array(series);
  }

  restart(): void {
    this.n = 0;
    this.first = this.last = 0;
    this.st = this.stt = 0;
    this.sv.fill(0);
    this.stv.fill(0);
    this.svv.fill(0);
  }

  /** One point; t is relative to an origin all sums that are compared share. */
  push(t: number, values: ArrayLike<number>, count: number): void {
    if (this.n === 0) this.first = t;
    this.last = t;
    this.n++;
    this.st += t;
    this.stt += t * t;
    for (let k = 0; k < count; k++) {
      const v = values[k]!;
      this.sv[k]! += v;
      this.stv[k]! += t * v;
      this.svv[k]! += v * v;
    }
  }
}

/** Slope and standard error from raw sums; slopeError is Infinity with fewer than 3 points. */
function fit(n: number, st: number, stt: number, sv: number, stv: number, svv: number): { slope: number; slopeError: number } {
  if (n < 3) return { slope: 0, slopeError: Infinity };
  const ttc = stt - (st * st) / n;
  if (!(ttc > 0)) return { slope: 0, slopeError: Infinity };
  const tvc = stv - (st * sv) / n;
  const vvc = svv - (sv * sv) / n;
  const slope = tvc / ttc;
  const sse = Math.max(0, vvc - slope * tvc);
  return { slope, slopeError: Math.sqrt(sse / (n - 2) / ttc) };
}

/** Slope and its standard error of series k of `s`. */
function slopeOf(s: TrendSums, k: number): { slope: number; slopeError: number } {
  return fit(s.n, s.st, s.stt, s.sv[k]!, s.stv[k]!, s.svv[k]!);
}

/** The same over the points in `all` but not in `part` (a later start of the same series). */
function slopeOfRest(all: TrendSums, part: TrendSums, k: number): { slope: number; slopeError: number } {
  return fit(all.n - part.n, all.st - part.st, all.stt - part.stt, all.sv[k]! - part.sv[k]!, all.stv[k]! - part.stv[k]!, all.svv[k]! - part.svv[k]!);
}

/** Slope, standard error and last fitted value of the least-squares line through (t, y). */
export function trend(t: readonly number[], y: readonly number[]): { slope: number; slopeError: number; last: number } {
  const s = new TrendSums(1);
  const v = new Float64Array(1);
  for (let i = 0; i < t.length; i++) {
    v[0] = y[i]!;
    s.push(t[i]! - t[0]!, v, 1);
  }
  const { slope, slopeError } = slopeOf(s, 0);
  const n = s.n;
  const mean = n > 0 ? s.sv[0]! / n : 0;
  const meanT = n > 0 ? s.st / n : 0;
  return { slope, slopeError, last: n > 0 ? mean + slope * (t[n - 1]! - t[0]! - meanT) : 0 };
}

export class DriftForecaster {
  /** Series 0..taps-1 are the taps, series `taps` is the weight mean. */
  private readonly values: Float64Array;
  private older: TrendSums;
  private newer: TrendSums;
  private windows = 0;
  private nextCheckpoint = 1;
  /** Times are pushed relative to the first window since the last restart. */
  private origin = 0;
  private readonly maxHorizonWindows: number;

  constructor(
    readonly taps: number,
    windowSeconds: number,
  ) {
    this.values = new Float64Array(taps + 1);
    this.older = new TrendSums(taps + 1);
    this.newer = new TrendSums(taps + 1);
    this.maxHorizonWindows = Math.max(8, Math.round(MAX_HORIZON_SECONDS / windowSeconds));
  }

  /** Forgets the history (the weights jumped: rollback, reset, restore). */
  restart(): void {
    this.windows = 0;
    this.nextCheckpoint = 1;
    this.older.restart();
    this.newer.restart();
  }

  /** One window: its end time and the adaptive weights at its end. */
  push(timeSeconds: number, weights: ArrayLike<number>): void {
    const L = this.taps;
    let sum = 0;
    for (let k = 0; k < L; k++) {
      this.values[k] = weights[k]!;
      sum += weights[k]!;
    }
    this.values[L] = sum / L;
    this.windows++;
    if (this.windows === 1) this.origin = timeSeconds;
    if (this.windows === this.nextCheckpoint) {
      [this.older, this.newer] = [this.newer, this.older];
      this.newer.restart();
      if (this.windows === 1) this.older.restart();
      const step = this.windows < this.maxHorizonWindows ? this.windows : Math.floor(this.maxHorizonWindows / 2);
      this.nextCheckpoint = this.windows + step;
    }
    const t = timeSeconds - this.origin;
    this.older.push(t, this.values, L + 1);
    this.newer.push(t, this.values, L + 1);
  }

  /** The forecast from the latest point; `limit` the arithmetic's largest |w|, `meanBound` the supervisor's. */
  forecast(limit: number, meanBound: number): DriftForecast {
    const s = this.older;
    const late = this.newer;
    const span = s.last - s.first;
    const L = this.taps;
    let eta: number | null = null;
    let low: number | null = null;
    let high: number | null = null;
    let tap: number | null = null;
    for (let k = 0; k < L; k++) {
      const { slope, slopeError } = slopeOf(s, k);
      const speed = Math.abs(slope);
      if (!(speed > SIGNIFICANCE * slopeError)) continue;
      // The early and late parts of the history: a straight line that does not hold across them
      // (a convergence slowing down, a step) adds their disagreement to the uncertainty.
      let sigma = slopeError;
      if (late.n >= 3 && s.n - late.n >= 3) {
        const a = slopeOfRest(s, late, k).slope;
        const b = slopeOf(late, k).slope;
        if (Math.sign(a) !== Math.sign(slope) || Math.sign(b) !== Math.sign(slope)) continue;
        sigma = Math.hypot(slopeError, (b - a) / 2);
      }
      const w = this.values[k]!;
      const gap = Math.max(0, slope > 0 ? limit - w : limit + w);
      const e = gap / speed;
      if (e > MAX_EXTRAPOLATION * span) continue;
      if (eta === null || e < eta) {
        eta = e;
        tap = k;
      }
      const lo = gap / (speed + INTERVAL * sigma);
      const hi = speed > INTERVAL * sigma ? gap / (speed - INTERVAL * sigma) : Infinity;
      if (low === null || lo < low) low = lo;
      if (high === null || hi < high) high = hi;
    }
    const m = slopeOf(s, L);
    const mean = this.values[L]!;
    const drifting = Math.abs(m.slope) > SIGNIFICANCE * m.slopeError;
    const meanEta = Math.max(0, (meanBound - Math.abs(mean)) / Math.abs(m.slope));
    const rising = drifting && Math.sign(m.slope) === Math.sign(mean) && mean !== 0 && meanEta <= MAX_EXTRAPOLATION * span;
    return {
      limitEtaSeconds: Number.isFinite(limit) ? eta : null,
      limitEtaLowSeconds: Number.isFinite(limit) ? low : null,
      limitEtaHighSeconds: Number.isFinite(limit) && high !== null && Number.isFinite(high) ? high : null,
      limitTap: Number.isFinite(limit) ? tap : null,
      meanBoundEtaSeconds: rising ? meanEta : null,
      meanSlopePerSecond: m.slope,
      horizonSeconds: span,
    };
  }
}
