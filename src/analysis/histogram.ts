/**
 * Quantiles over a stream in fixed memory: a histogram of 0.01 dB bins over [-400, 400] dB (the
 * range a difference of two floored powers can take, src/dsp/level.ts). A quantile is taken by
 * the nearest-rank method (the smallest value with at least q of the values at or below it,
 * numpy's 'inverted_cdf') and reported as its bin's centre, so it is exact to 0.005 dB. This is
 * the one quantile function tapwarden uses: summaries, comparisons and sweeps all read it.
 */

const LO = -400;
const HI = 400;
export const HISTOGRAM_RESOLUTION_DB = 0.01;
const BINS = Math.round((HI - LO) / HISTOGRAM_RESOLUTION_DB) + 1;

export class DbHistogram {
  private readonly counts = new Uint32Array(BINS);
  count = 0;

  add(db: number): void {
    const v = db < LO ? LO : db > HI ? HI : db;
    this.counts[Math.round((v - LO) / HISTOGRAM_RESOLUTION_DB)]!++;
    this.count++;
  }

  /** The q-quantile (0 < q <= 1) by nearest rank; null when empty. */
  quantile(q: number): number | null {
    if (this.count === 0) return null;
    const rank = Math.max(1, Math.ceil(q * this.count));
    let seen = 0;
    for (let b = 0; b < BINS; b++) {
      seen += this.counts[b]!;
      if (seen >= rank) return +(LO + b * HISTOGRAM_RESOLUTION_DB).toFixed(2);
    }
    return HI;
  }
}

/**
 * The same nearest-rank q-quantile of a short list (a sweep's figures over its recordings), exact;
 * nulls (no figure) rank lowest. Null for an empty list.
 */
export function nearestRank(values: readonly (number | null)[], q: number): number | null {
  if (values.length === 0) return null;
  const sorted = [...values].sort((a, b) => (a ?? -Infinity) - (b ?? -Infinity));
  return sorted[Math.max(1, Math.ceil(q * sorted.length)) - 1]!;
}
