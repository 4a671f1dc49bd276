import type { Rounding } from './fixed.js';

export type Arithmetic = 'float64' | 'float32' | 'q15' | 'q31';
export type Algorithm = 'lms' | 'nlms' | 'pbfdaf';

export const ARITHMETICS: readonly Arithmetic[] = ['float64', 'float32', 'q15', 'q31'];
export const ALGORITHMS: readonly Algorithm[] = ['lms', 'nlms', 'pbfdaf'];

/** Everything a kernel needs to know; units are real (full scale = 1.0). */
export interface AdaptiveSpec {
  readonly algorithm: Algorithm;
  readonly taps: number;
  /** mu: the LMS step, or the NLMS normalized step (0 < mu < 2). */
  readonly step: number;
  /** NLMS regularization added to ||x||^2. */
  readonly delta: number;
  /**
   * gamma: w <- (1 - mu gamma) w + mu_n e x. The leak uses the unnormalized step mu even in NLMS,
   * so it stays a contraction when the reference goes silent (README "Leak").
   */
  readonly leak: number;
  /** k: w <- w - (w >> k) each sample; null for none. */
  readonly leakShift: number | null;
  /** Subtract the weight mean every N samples; null for never. */
  readonly meanRemovalEvery: number | null;
  readonly arithmetic: Arithmetic;
  readonly rounding: Rounding;
  /** Largest |w| a float store may hold (fixed point is bounded by its format). */
  readonly weightLimit: number;
  /** pbfdaf: partition length N (taps must be a multiple). */
  readonly blockSize?: number;
  /** pbfdaf: apply the gradient constraint. */
  readonly constrained?: boolean;
  /**
   * K: references the filter has (default 1), one `taps`-long filter each (floatKernel.ts, fixedKernel.ts): the
   * samples come interleaved, x[n K + k], and the weights hold K x taps values.
   */
  readonly references?: number;
}

export interface WeightStats {
  mean: number;
  norm: number;
  maxAbs: number;
  /** The smallest and largest weight (signed). */
  min: number;
  max: number;
}

/**
 * One adaptive transversal filter. Tap k multiplies x[n-k]. `run` processes samples
 * [start, end) of the given arrays, allocates nothing and never throws. With K references
 * (spec.references), x and noise hold K values per sample, interleaved.
 */
export interface AdaptiveKernel {
  readonly spec: AdaptiveSpec;
  /** Cleared to stop adaptation; filtering goes on. */
  adapting: boolean;
  /** Weight stores that clipped (the drift symptom), since creation. */
  readonly weightSaturations: number;
  /** Signal stores that clipped (input quantization, outputs, error, update gain), since creation. */
  readonly signalSaturations: number;
  /**
   * x: reference, d: desired, noise: added to the reference the filter adapts on (null: none).
   * y, e receive the estimate and d - y of the current weights on the un-noised reference.
   */
  run(
    x: Float64Array,
    d: Float64Array,
    noise: Float64Array | null,
    y: Float64Array,
    e: Float64Array,
    start: number,
    end: number,
  ): void;
  /** The taps in real units, tap 0 first. */
  getWeights(): Float64Array;
  /** The same into `out` (length taps), allocating nothing. */
  readWeights(out: Float64Array): void;
  setWeights(w: ArrayLike<number>): void;
  /**
   * Loads the filter this kernel runs into a clean-path kernel of the same spec, exactly: what
   * the supervisor judged is what the clean path gets (for pbfdaf, the partition spectra).
   */
  copyTo(fir: FirKernel): void;
  /** Clears the delay line(s) and weights. */
  reset(): void;
  weightStats(out: WeightStats): WeightStats;
  /**
   * Takes new step, delta, leak, leakShift and meanRemovalEvery (same algorithm, taps and
   * arithmetic) from the next sample on; weights and delay lines stay (serve's live settings).
   */
  retune(spec: AdaptiveSpec): void;
}

/** A fixed-weight transversal filter in the same arithmetic: the clean path's filter. */
export interface FirKernel {
  readonly taps: number;
  /** Signal stores that clipped (input quantization, output, error), since creation. */
  readonly signalSaturations: number;
  /** Filters x into y and writes e = d - y, over samples [start, end). */
  run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void;
  getWeights(): Float64Array;
  setWeights(w: ArrayLike<number>): void;
  /** Takes over another filter's weights exactly (same spec). */
  copyWeightsFrom(other: FirKernel): void;
  /** Takes over another filter's delay line (same arithmetic and length). */
  copyHistoryFrom(other: FirKernel): void;
  reset(): void;
  weightStats(out: WeightStats): WeightStats;
}

export function statsOf(w: ArrayLike<number>, scale: number, out: WeightStats): WeightStats {
  let sum = 0;
  let sq = 0;
  let lo = Infinity;
  let hi = -Infinity;
  for (let k = 0; k < w.length; k++) {
    const v = w[k]! * scale;
    sum += v;
    sq += v * v;
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  out.mean = sum / w.length;
  out.norm = Math.sqrt(sq);
  out.min = lo;
  out.max = hi;
  out.maxAbs = Math.max(-lo, hi);
  return out;
}
