import FFT from 'fft.js';
import { statsOf, type AdaptiveKernel, type AdaptiveSpec, type FirKernel, type WeightStats } from './types.js';

/**
 * The partitioned-block frequency-domain adaptive filter (PBFDAF, also called the multidelay
 * filter): overlap-save with a 2N-point FFT, the L taps cut into P = L/N partitions of N taps,
 * each with its own spectrum, fed from a frequency-domain delay line of input spectra. Sources:
 * Soo & Pang, IEEE Trans. ASSP 38(2), 1990 (multidelay); Shynk, "Frequency-domain and multirate
 * adaptive filtering", IEEE SP Magazine 9(1), 1992; Ferrara, IEEE Trans. ASSP 28(4), 1980.
 *
 * The update is block LMS with a per-bin step: the gradient conj(X) E of each partition is scaled
 * in each frequency bin b by step / (D_b / 2 + delta), then (constrained form) projected back onto
 * N-tap partitions. D_b is the larger of the bin's smoothed input power times P (floored at
 * POWER_FLOOR of the mean over bins) and its instantaneous power summed over the P partitions, so
 * no block's gain in any bin exceeds the step. With a uniform step (normalized: false, for tests)
 * the constrained form is exactly time-domain block LMS; with the per-bin step it is block LMS
 * preconditioned by a circulant (frequency-domain) step, which is not. Without the constraint
 * (Mansour & Gray, IEEE Trans. ASSP 30(5), 1982) each update saves 2P FFTs but a partition's
 * response is 2N taps that wrap circularly. The stability bound, step < 1 for both forms, is
 * measured (test/dsp/fdaf.test.ts, README "pbfdaf"). Outputs are one block late: sample n of the
 * output streams belongs to input sample n - N (latency N samples).
 */

export interface FdafOptions {
  /** Partition (block) length N; L must be a multiple of it. */
  readonly blockSize: number;
  readonly constrained: boolean;
  /** Per-bin power normalization; off gives plain block LMS with step mu (for tests). */
  readonly normalized?: boolean;
}

/** Smoothing of the per-bin input power, per block. */
const POWER_SMOOTHING = 0.9;
/**
 * A bin's smoothed power is floored at this fraction of the mean over bins, so that bins the
 * input does not excite (a band-limited or tonal reference) do not get a step the gradient
 * constraint would couple back into the loud bins. 0.01 lets a two-tone reference diverge at
 * step 0.1 with P = 2; 0.3 is the smallest of those measured that kept every case finite.
 */
const POWER_FLOOR = 0.3;
/** The instantaneous per-bin power sum is recomputed exactly every this many blocks. */
const RESUM_BLOCKS = 256;

/**
 * Real 2N-point transforms over bins 0..N (interleaved re, im), on fft.js. The inverse runs as
 * one N-point complex transform of z[n] = x[2n] + j x[2n+1], whose spectrum follows from the
 * Hermitian half: Z[k] = X_e[k] + j X_o[k], X_e[k] = (X[k] + X*[N-k]) / 2,
 * X_o[k] = (X[k] - X*[N-k]) e^{+j pi k / N} / 2 (the even/odd split of the decimation in time).
 */
export class RealFft {
  private readonly fft: FFT;
  private readonly half: FFT;
  private readonly out: Float64Array;
  private readonly z: Float64Array;
  private readonly zt: Float64Array;
  private readonly cos: Float64Array;
  private readonly sin: Float64Array;

  constructor(readonly size: number) {
    const N = size / 2;
    this.fft = new FFT(size);
    this.half = new FFT(N);
    this.out = new Float64Array(2 * size);
    this.z = new Float64Array(2 * N);
    this.zt = new Float64Array(2 * N);
    this.cos = new Float64Array(N);
    this.sin = new Float64Array(N);
    for (let k = 0; k < N; k++) {
      this.cos[k] = Math.cos((Math.PI * k) / N);
      this.sin[k] = Math.sin((Math.PI * k) / N);
    }
  }

  /** spectrum[0 .. 2(N+1)) <- FFT(signal), signal of length 2N. */
  forward(signal: Float64Array, spectrum: Float64Array): void {
    this.fft.realTransform(this.out, signal);
    for (let i = 0; i < this.size + 2; i++) spectrum[i] = this.out[i]!;
  }

  /** signal <- the inverse FFT of the Hermitian spectrum given by bins 0..N (real). */
  inverse(X: Float64Array, signal: Float64Array): void {
    const N = this.size / 2;
    const z = this.z;
    for (let k = 0; k < N; k++) {
      const ar = X[2 * k]!;
      const ai = X[2 * k + 1]!;
      const br = X[2 * (N - k)]!; // X*[N-k] = (br, -bi)
      const bi = -X[2 * (N - k) + 1]!;
      const er = 0.5 * (ar + br);
      const ei = 0.5 * (ai + bi);
      const dr = 0.5 * (ar - br);
      const di = 0.5 * (ai - bi);
      const c = this.cos[k]!;
      const s = this.sin[k]!;
      const or = dr * c - di * s; // X_o = d e^{+j pi k / N}
      const oi = dr * s + di * c;
      z[2 * k] = er - oi; // Z = X_e + j X_o
      z[2 * k + 1] = ei + or;
    }
    this.half.inverseTransform(this.zt, z);
    for (let n = 0; n < N; n++) {
      signal[2 * n] = this.zt[2 * n]!;
      signal[2 * n + 1] = this.zt[2 * n + 1]!;
    }
  }
}

/** Called once per completed block of N samples. */
interface BlockHandler {
  onBlock(): void;
}

/** The block machinery both paths share: input buffering, spectra history, one block of delay. */
class PartitionedFilter {
  readonly N: number;
  readonly P: number;
  readonly bins: number;
  readonly rfft: RealFft;
  /** Input spectra, newest first: history[(head + p) % P] is p blocks old. */
  readonly history: Float64Array[];
  head = 0;
  /** Blocks completed since the last clear: two filters fed the same stream agree on it. */
  blockCount = 0;
  /**
   * A filter fed the same input (the adaptive path, for the clean path): when it has already
   * transformed this block, its spectrum is copied instead of computing the same FFT again.
   */
  partner: PartitionedFilter | null = null;
  /** Partition spectra (interleaved re, im over bins 0..N). */
  readonly weights: Float64Array[];
  readonly inBuf: Float64Array;
  readonly dBuf: Float64Array;
  readonly outY: Float64Array;
  readonly outE: Float64Array;
  fill = 0;
  private readonly Y: Float64Array;
  /** Scratch for one 2N-sample time signal. */
  readonly time: Float64Array;

  constructor(taps: number, blockSize: number) {
    if (taps % blockSize !== 0) throw new RangeError(`taps ${taps} is not a multiple of the block size ${blockSize}`);
    this.N = blockSize;
    this.P = taps / blockSize;
    this.bins = blockSize + 1;
    this.rfft = new RealFft(2 * blockSize);
    this.history = Array.from({ length: this.P }, () => new Float64Array(2 * this.bins));
    this.weights = Array.from({ length: this.P }, () => new Float64Array(2 * this.bins));
    this.inBuf = new Float64Array(2 * blockSize);
    this.dBuf = new Float64Array(blockSize);
    this.outY = new Float64Array(blockSize);
    this.outE = new Float64Array(blockSize);
    this.Y = new Float64Array(2 * this.bins);
    this.time = new Float64Array(2 * blockSize);
  }

  /** Feeds samples; every N of them, `handler.onBlock` runs. Outputs lag one block. */
  feed(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number, handler: BlockHandler): void {
    const N = this.N;
    for (let n = start; n < end; ) {
      const f = this.fill;
      const m = Math.min(end - n, N - f);
      // Copy loops, not set(subarray): this runs per call and must allocate nothing.
      for (let j = 0; j < m; j++) {
        y[n + j] = this.outY[f + j]!;
        e[n + j] = this.outE[f + j]!;
        this.inBuf[N + f + j] = x[n + j]!;
        this.dBuf[f + j] = d[n + j]!;
      }
      n += m;
      this.fill += m;
      if (this.fill === N) {
        this.fill = 0;
        this.head = (this.head + this.P - 1) % this.P;
        const p = this.partner;
        if (p !== null && p.blockCount === this.blockCount + 1) this.history[this.head]!.set(p.history[p.head]!);
        else this.rfft.forward(this.inBuf, this.history[this.head]!);
        this.blockCount++;
        handler.onBlock();
        this.inBuf.copyWithin(0, N);
      }
    }
  }

  /** outY, outE <- the block's output with the current weights. */
  filterBlock(): void {
    const { P, bins, Y, time, N } = this;
    Y.fill(0);
    for (let p = 0; p < P; p++) {
      const X = this.history[(this.head + p) % P]!;
      const W = this.weights[p]!;
      for (let b = 0; b < 2 * bins; b += 2) {
        const xr = X[b]!;
        const xi = X[b + 1]!;
        const wr = W[b]!;
        const wi = W[b + 1]!;
        Y[b] += wr * xr - wi * xi;
        Y[b + 1] += wr * xi + wi * xr;
      }
    }
    this.rfft.inverse(Y, time);
    for (let i = 0; i < N; i++) {
      this.outY[i] = time[N + i]!;
      this.outE[i] = this.dBuf[i]! - time[N + i]!;
    }
  }

  /**
   * Time-domain taps: the first N samples of each partition's response. For the unconstrained
   * form this leaves out each partition's wrapped second half (see copyWeightsFrom for what a
   * handoff copies).
   */
  timeWeights(w: Float64Array = new Float64Array(this.P * this.N)): Float64Array {
    for (let p = 0; p < this.P; p++) {
      this.rfft.inverse(this.weights[p]!, this.time);
      for (let j = 0; j < this.N; j++) w[p * this.N + j] = this.time[j]!;
    }
    return w;
  }

  setTimeWeights(w: ArrayLike<number>): void {
    for (let p = 0; p < this.P; p++) {
      this.time.fill(0);
      for (let j = 0; j < this.N; j++) this.time[j] = w[p * this.N + j] ?? 0;
      this.rfft.forward(this.time, this.weights[p]!);
    }
  }

  /** The partition spectra, exactly: what a handoff hands over. */
  copyWeightsFrom(o: PartitionedFilter): void {
    for (let p = 0; p < this.P; p++) this.weights[p]!.set(o.weights[p]!);
  }

  copyStateFrom(o: PartitionedFilter): void {
    for (let p = 0; p < this.P; p++) this.history[p]!.set(o.history[p]!);
    this.head = o.head;
    this.inBuf.set(o.inBuf);
    this.dBuf.set(o.dBuf);
    this.outY.set(o.outY);
    this.outE.set(o.outE);
    this.fill = o.fill;
    this.blockCount = o.blockCount;
  }

  clear(): void {
    for (let p = 0; p < this.P; p++) {
      this.history[p]!.fill(0);
      this.weights[p]!.fill(0);
    }
    this.inBuf.fill(0);
    this.dBuf.fill(0);
    this.outY.fill(0);
    this.outE.fill(0);
    this.head = 0;
    this.fill = 0;
    this.blockCount = 0;
  }
}

export class FdafAdaptiveKernel implements AdaptiveKernel, BlockHandler {
  adapting = true;
  weightSaturations = 0;
  readonly signalSaturations = 0;
  /** @internal shared with the clean path's filter (see PartitionedFilter.partner). */
  readonly pf: PartitionedFilter;
  /** Smoothed power of the newest block's spectrum, per bin. */
  private readonly power: Float64Array;
  /** Instantaneous power per bin summed over the P partitions (a running sum). */
  private readonly powerSum: Float64Array;
  /** The oldest spectrum in the history, saved before the next block overwrites it. */
  private readonly lastLeaving: Float64Array;
  /** Time-domain taps for the per-window statistics. */
  private readonly scratch: Float64Array;
  private readonly muBin: Float64Array;
  private readonly E: Float64Array;
  private readonly G: Float64Array;
  private readonly g: Float64Array;
  private readonly normalized: boolean;
  /** The leak over one block of N samples: (1 - step leak)^N (1 - 2^-k)^N. */
  private keep: number;
  private blocks = 0;

  constructor(
    public spec: AdaptiveSpec,
    private readonly opts: FdafOptions,
  ) {
    this.pf = new PartitionedFilter(spec.taps, opts.blockSize);
    this.normalized = opts.normalized ?? true;
    this.power = new Float64Array(this.pf.bins);
    this.powerSum = new Float64Array(this.pf.bins);
    this.lastLeaving = new Float64Array(2 * this.pf.bins);
    this.scratch = new Float64Array(spec.taps);
    this.muBin = new Float64Array(this.pf.bins);
    this.E = new Float64Array(2 * this.pf.bins);
    this.G = new Float64Array(2 * this.pf.bins);
    this.g = new Float64Array(2 * opts.blockSize);
    this.keep = this.keepOf(spec);
  }

  /** The leak uses the unnormalized step, as in the time-domain kernels: its factor over a block. */
  private keepOf(spec: AdaptiveSpec): number {
    const N = this.opts.blockSize;
    return (1 - spec.step * spec.leak) ** N * (spec.leakShift === null ? 1 : (1 - 2 ** -spec.leakShift) ** N);
  }

  retune(spec: AdaptiveSpec): void {
    this.spec = spec;
    this.keep = this.keepOf(spec);
  }

  run(x: Float64Array, d: Float64Array, _noise: Float64Array | null, y: Float64Array, e: Float64Array, start: number, end: number): void {
    this.pf.feed(x, d, y, e, start, end, this);
  }

  /** One block: filter, then (when adapting) update every partition and enforce the weight limit. */
  onBlock(): void {
    const pf = this.pf;
    const { N, P, bins, history, weights, rfft } = pf;
    this.trackPower(history[pf.head]!);
    pf.filterBlock();
    if (!this.adapting) return;
    const { step, delta } = this.spec;
    const muBin = this.muBin;
    if (this.normalized) {
      let meanPower = 0;
      for (let b = 0; b < bins; b++) meanPower += this.power[b]!;
      const floor = (POWER_FLOOR * meanPower) / bins;
      for (let b = 0; b < bins; b++) {
        const D = Math.max(P * Math.max(this.power[b]!, floor), this.powerSum[b]!);
        muBin[b] = step / (D / 2 + delta);
      }
    } else muBin.fill(step);
    // E = FFT([0_N, e_block])
    const g = this.g;
    for (let i = 0; i < N; i++) {
      g[i] = 0;
      g[N + i] = pf.outE[i]!;
    }
    rfft.forward(g, this.E);
    const E = this.E;
    const G = this.G;
    const keep = this.keep;
    for (let p = 0; p < P; p++) {
      const X = history[(pf.head + p) % P]!;
      for (let b = 0; b < bins; b++) {
        const mu = muBin[b]!;
        const xr = X[2 * b]!;
        const xi = X[2 * b + 1]!;
        const er = E[2 * b]!;
        const ei = E[2 * b + 1]!;
        // conj(X) E
        G[2 * b] = mu * (xr * er + xi * ei);
        G[2 * b + 1] = mu * (xr * ei - xi * er);
      }
      if (this.opts.constrained) {
        rfft.inverse(G, g);
        g.fill(0, N);
        rfft.forward(g, G);
      }
      const W = weights[p]!;
      for (let i = 0; i < 2 * bins; i++) W[i] = keep * W[i]! + G[i]!;
    }
    this.limitWeights();
  }

  /**
   * Smooths the newest block's per-bin power and keeps the P-partition instantaneous sum: the
   * newest spectrum enters it and the one it overwrote in the history (saved a block ago in
   * lastLeaving) leaves it; recomputed exactly every RESUM_BLOCKS blocks.
   */
  private trackPower(X0: Float64Array): void {
    const { P, bins, history, head } = this.pf;
    const a = this.blocks === 0 ? 0 : POWER_SMOOTHING;
    const resum = this.blocks % RESUM_BLOCKS === 0;
    this.blocks++;
    for (let b = 0; b < bins; b++) {
      const p = X0[2 * b]! ** 2 + X0[2 * b + 1]! ** 2;
      this.power[b] = a * this.power[b]! + (1 - a) * p;
    }
    if (resum || P === 1) {
      this.powerSum.fill(0);
      for (let q = 0; q < P; q++) {
        const X = history[(head + q) % P]!;
        for (let b = 0; b < bins; b++) this.powerSum[b]! += X[2 * b]! ** 2 + X[2 * b + 1]! ** 2;
      }
      this.lastLeaving.set(history[(head + P - 1) % P]!);
      return;
    }
    const old = this.lastLeaving;
    for (let b = 0; b < bins; b++) {
      const add = X0[2 * b]! ** 2 + X0[2 * b + 1]! ** 2;
      const drop = old[2 * b]! ** 2 + old[2 * b + 1]! ** 2;
      this.powerSum[b] = Math.max(0, this.powerSum[b]! + add - drop);
    }
    old.set(history[(head + P - 1) % P]!);
  }

  /**
   * Clips time-domain weights beyond filter.weightLimit, counting each clipped tap. By Parseval,
   * max |w| <= ||w|| = sqrt(sum |W_k|^2 / 2N), so while the partitions' total energy is within
   * the limit (always, for a filter that has not diverged) no transform is needed.
   */
  private limitWeights(): void {
    const pf = this.pf;
    const { N, P, bins, weights, rfft, time } = pf;
    const lim = this.spec.weightLimit;
    let energy = 0;
    for (let p = 0; p < P; p++) {
      const W = weights[p]!;
      let e = W[0]! ** 2 + W[1]! ** 2 + W[2 * N]! ** 2 + W[2 * N + 1]! ** 2;
      for (let b = 1; b < bins - 1; b++) e += 2 * (W[2 * b]! ** 2 + W[2 * b + 1]! ** 2);
      energy += e;
    }
    if (energy / (2 * N) <= lim * lim) return;
    for (let p = 0; p < P; p++) {
      rfft.inverse(weights[p]!, time);
      let clipped = 0;
      for (let i = 0; i < 2 * N; i++) {
        const v = time[i]!;
        if (!(v <= lim && v >= -lim)) {
          time[i] = v > 0 ? lim : v < 0 ? -lim : 0;
          clipped++;
        }
      }
      if (clipped > 0) {
        this.weightSaturations += clipped;
        rfft.forward(time, weights[p]!);
      }
    }
  }

  getWeights(): Float64Array {
    return this.pf.timeWeights();
  }

  readWeights(out: Float64Array): void {
    this.pf.timeWeights(out);
  }

  setWeights(w: ArrayLike<number>): void {
    this.pf.setTimeWeights(w);
  }

  copyTo(fir: FirKernel): void {
    (fir as FdafFirKernel).takeWeights(this.pf);
  }

  reset(): void {
    this.pf.clear();
    this.power.fill(0);
    this.powerSum.fill(0);
    this.lastLeaving.fill(0);
    this.blocks = 0;
  }

  weightStats(out: WeightStats): WeightStats {
    return statsOf(this.pf.timeWeights(this.scratch), 1, out);
  }
}

/**
 * The clean path for PBFDAF: the same partitioned convolution with fixed weights. Its weight
 * statistics change only when its weights do, so they are computed then, not every window.
 */
export class FdafFirKernel implements FirKernel, BlockHandler {
  readonly signalSaturations = 0;
  /** @internal */
  readonly pf: PartitionedFilter;
  private readonly stats: WeightStats = { mean: 0, norm: 0, maxAbs: 0, min: 0, max: 0 };
  private statsValid = false;

  /** `partner`: the adaptive path fed the same reference, whose input spectra this one reuses. */
  constructor(spec: AdaptiveSpec, opts: FdafOptions, partner?: FdafAdaptiveKernel) {
    this.pf = new PartitionedFilter(spec.taps, opts.blockSize);
    this.pf.partner = partner?.pf ?? null;
  }

  get taps(): number {
    return this.pf.P * this.pf.N;
  }

  run(x: Float64Array, d: Float64Array, y: Float64Array, e: Float64Array, start: number, end: number): void {
    this.pf.feed(x, d, y, e, start, end, this);
  }

  onBlock(): void {
    this.pf.filterBlock();
  }

  getWeights(): Float64Array {
    return this.pf.timeWeights();
  }

  setWeights(w: ArrayLike<number>): void {
    this.pf.setTimeWeights(w);
    this.statsValid = false;
  }

  copyWeightsFrom(other: FirKernel): void {
    this.pf.copyWeightsFrom((other as FdafFirKernel).pf);
    this.statsValid = false;
  }

  /** @internal A handoff from the adaptive path (FdafAdaptiveKernel.copyTo). */
  takeWeights(from: PartitionedFilter): void {
    this.pf.copyWeightsFrom(from);
    this.statsValid = false;
  }

  copyHistoryFrom(other: FirKernel): void {
    this.pf.copyStateFrom((other as FdafFirKernel).pf);
  }

  reset(): void {
    this.pf.clear();
    this.statsValid = false;
  }

  weightStats(out: WeightStats): WeightStats {
    if (!this.statsValid) {
      statsOf(this.pf.timeWeights(), 1, this.stats);
      this.statsValid = true;
    }
    return Object.assign(out, this.stats);
  }
}
