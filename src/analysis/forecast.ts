/**
 * Drift forecast: a least-squares line through the recent trend of a weight figure (max |w| or
 * |weight mean|) against time, extrapolated to a limit. Pure; fed one point per window.
 */

export interface DriftForecast {
  /** Seconds from the last point until max |w| reaches the arithmetic's limit; null if not rising. */
  limitEtaSeconds: number | null;
  /** Seconds until |weight mean| reaches the supervisor's bound; null if not rising. */
  meanBoundEtaSeconds: number | null;
  /** Trend of max |w|, full scale per second. */
  maxAbsSlopePerSecond: number;
  /** Trend of |weight mean|, full scale per second. */
  meanSlopePerSecond: number;
}

/** Slope and value at the last point of the least-squares line through (t, y). */
export function trend(t: readonly number[], y: readonly number[]): { slope: number; last: number } {
  const n = t.length;
  if (n < 2) return { slope: 0, last: y[n - 1] ?? 0 };
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
  return { slope, last: my + slope * (t[n - 1]! - mt) };
}

function eta(slope: number, last: number, limit: number): number | null {
  if (!(slope > 0) || !Number.isFinite(limit)) return null;
  return Math.max(0, (limit - last) / slope);
}

export class DriftForecaster {
  private readonly t: number[] = [];
  private readonly maxAbs: number[] = [];
  private readonly mean: number[] = [];

  /** `points`: how many recent windows the trend uses. */
  constructor(private readonly points: number) {}

  push(timeSeconds: number, maxAbsWeight: number, weightMean: number): void {
    this.t.push(timeSeconds);
    this.maxAbs.push(maxAbsWeight);
    this.mean.push(Math.abs(weightMean));
    if (this.t.length > this.points) {
      this.t.shift();
      this.maxAbs.shift();
      this.mean.shift();
    }
  }

  forecast(limit: number, meanBound: number): DriftForecast {
    const a = trend(this.t, this.maxAbs);
    const m = trend(this.t, this.mean);
    return {
      limitEtaSeconds: eta(a.slope, a.last, limit),
      meanBoundEtaSeconds: eta(m.slope, m.last, meanBound),
      maxAbsSlopePerSecond: a.slope,
      meanSlopePerSecond: m.slope,
    };
  }
}

/** Windows of trend for a window length: about 10 s, at least 4 windows. */
export function trendPoints(windowSeconds: number): number {
  return Math.max(4, Math.round(10 / windowSeconds));
}
