/**
 * Drift forecast. Drift from biased arithmetic moves all taps together, along the weight-mean
 * direction the input does not excite; so the forecast fits a least-squares line to the weight
 * mean over the recent windows and moves the most extreme tap at that rate until it meets the
 * limit. Pure; fed one point per window.
 */

export interface DriftForecast {
  /** Seconds from the last point until a tap reaches the arithmetic's limit; null if not drifting toward it. */
  limitEtaSeconds: number | null;
  /** Seconds until |weight mean| reaches the supervisor's bound; null if not rising. */
  meanBoundEtaSeconds: number | null;
  /** Trend of the weight mean, full scale per second (signed). */
  meanSlopePerSecond: number;
}

/**
 * Slope, its standard error, and the value at the last point of the least-squares line through
 * (t, y).
 */
export function trend(t: readonly number[], y: readonly number[]): { slope: number; slopeError: number; last: number } {
  const n = t.length;
  if (n < 3) return { slope: 0, slopeError: Infinity, last: y[n - 1] ?? 0 };
  let st = 0;
  let sy = 0;
  for (let i = 0; i < n; i++) {
    st += t[i]!;
    sy += y[i]!;
  }
  const mt = st / n;
  const my = sy / n;
  let num = 0;
  let den = 0;
  for (let i = 0; i < n; i++) {
    num += (t[i]! - mt) * (y[i]! - my);
    den += (t[i]! - mt) ** 2;
  }
  const slope = den > 0 ? num / den : 0;
  let residual = 0;
  for (let i = 0; i < n; i++) residual += (y[i]! - my - slope * (t[i]! - mt)) ** 2;
  const slopeError = den > 0 ? Math.sqrt(residual / (n - 2) / den) : Infinity;
  return { slope, slopeError, last: my + slope * (t[n - 1]! - mt) };
}

/** A slope counts as drift only when it stands out of the scatter by this many standard errors. */
const SIGNIFICANCE = 3;

function eta(slope: number, last: number, limit: number): number | null {
  if (!(slope > 0) || !Number.isFinite(limit)) return null;
  return Math.max(0, (limit - last) / slope);
}

export class DriftForecaster {
  private readonly t: number[] = [];
  private readonly mean: number[] = [];
  private min = 0;
  private max = 0;

  /** `points`: how many recent windows the trend uses. */
  constructor(private readonly points: number) {}

  /** One window: its end time, the weight mean, and the smallest and largest weight. */
  push(timeSeconds: number, weightMean: number, minWeight: number, maxWeight: number): void {
    this.t.push(timeSeconds);
    this.mean.push(weightMean);
    this.min = minWeight;
    this.max = maxWeight;
    if (this.t.length > this.points) {
      this.t.shift();
      this.mean.shift();
    }
  }

  forecast(limit: number, meanBound: number): DriftForecast {
    const m = trend(this.t, this.mean);
    // A weight mean that wanders with the signal is not drift: no forecast from it.
    const r = Math.abs(m.slope) > SIGNIFICANCE * m.slopeError ? m.slope : 0;
    // The extreme tap in the direction of the drift meets the limit first.
    const limitEtaSeconds = r < 0 ? eta(-r, -this.min, limit) : eta(r, this.max, limit);
    const meanBoundEtaSeconds = eta(Math.sign(m.last) * r, Math.abs(m.last), meanBound);
    return { limitEtaSeconds, meanBoundEtaSeconds, meanSlopePerSecond: m.slope };
  }
}

/** Windows of trend for a window length: about 10 s, at least 4 windows. */
export function trendPoints(windowSeconds: number): number {
  return Math.max(4, Math.round(10 / windowSeconds));
}
