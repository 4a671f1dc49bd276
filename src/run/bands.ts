import { WelchPsd, octaveBands, type bandBounds } from '../analysis/welch.js';
import type { RunEvent } from './record.js';
import type { RunSink } from './run.js';

/**
 * Per octave band, what the clean output did (README "summary.json", `bands`): the cancellation
 * achieved, 10 log10(P_desired / P_clean), beside the bound the reference-measurement coherence
 * sets; with a truth recording (the wanted signal alone), the signal-to-distortion ratio of the
 * clean output against it, 10 log10(P_truth / P_(clean - truth)): how much of the wanted signal
 * survived. Welch spectra on the replay's segments (src/analysis/welch.ts), from the first
 * handoff on (before it the clean path has nothing to cancel with; the summary reports that
 * convergence time apart). A band where the truth is more than 60 dB below its strongest band
 * holds no wanted signal and gets no survival figure.
 */
export interface BandFigures {
  centreHz: number;
  lowHz: number;
  highHz: number;
  /** Cancellation a linear time-invariant filter of the reference could reach at most here. */
  boundDb: number | null;
  coherence: number | null;
  achievedDb: number | null;
  /** With --truth: SDR of the clean output against the wanted signal. */
  survivedDb: number | null;
}

const ratioDb = (num: number, den: number) => (num > 0 && den > 0 ? 10 * Math.log10(num / den) : null);

/** Sums PSD bins in [lo, hi). */
function bandPower(f: Float64Array, psd: Float64Array, lo: number, hi: number): number {
  let p = 0;
  for (let k = 0; k < f.length; k++) if (f[k]! >= lo && f[k]! < hi) p += psd[k]!;
  return p;
}

export class BandSink implements RunSink {
  private readonly clean: WelchPsd;
  private readonly desiredPsd: WelchPsd;
  private active = false;
  private readonly diff: WelchPsd | null;
  private readonly truthPsd: WelchPsd | null;
  private readonly delay: Float64Array;
  private readonly scratch: Float64Array;
  private readonly delayed: Float64Array;
  private delayAt = 0;
  constructor(
    segment: number,
    /** The replay's stride over Welch segments (replaySpectrumStride), as its cross-spectra. */
    stride: number,
    private readonly rate: number,
    /** Where the replay reads each block of the truth recording before the block runs, or null. */
    private readonly truth: Float64Array | null,
    /** The clean output lags its input by this many samples (pbfdaf: one block). */
    private readonly latency: number,
    maxBlock: number,
  ) {
    this.clean = new WelchPsd(segment, rate, stride);
    this.desiredPsd = new WelchPsd(segment, rate, stride);
    this.diff = truth ? new WelchPsd(segment, rate, stride) : null;
    this.truthPsd = truth ? new WelchPsd(segment, rate, stride) : null;
    this.delay = new Float64Array(Math.max(1, latency));
    this.scratch = new Float64Array(maxBlock);
    this.delayed = new Float64Array(maxBlock);
  }

  onEvent(event: RunEvent): void {
    if (event.type === 'handoff') this.active = true;
  }

  onBlock(clean: Float64Array, _adaptive: Float64Array, n: number, desired: Float64Array): void {
    if (!this.active) return;
    this.clean.push(clean, n);
    this.desiredPsd.push(desired, n);
    const t = this.truth;
    if (t === null || this.diff === null) return;
    const s = this.scratch;
    for (let i = 0; i < n; i++) {
      let v = t[i]!;
      if (this.latency > 0) {
        const old = this.delay[this.delayAt]!;
        this.delay[this.delayAt] = v;
        this.delayAt = (this.delayAt + 1) % this.latency;
        v = old;
      }
      s[i] = clean[i]! - v;
      this.delayed[i] = v;
    }
    this.diff.push(s, n);
    this.truthPsd!.push(this.delayed, n);
  }

  figures(bounds: ReturnType<typeof bandBounds>): BandFigures[] {
    const c = this.clean.result();
    const d = this.desiredPsd.result();
    const e = this.diff?.result() ?? null;
    const tr = this.truthPsd?.result() ?? null;
    const bands = octaveBands(this.rate);
    const truthPower = bands.map((b) => (tr === null ? 0 : bandPower(tr.frequencies, tr.psd, b.lowHz, b.highHz)));
    const strongest = Math.max(0, ...truthPower);
    return bands.map((b, i) => ({
      ...b,
      boundDb: bounds[i]?.boundDb ?? null,
      coherence: bounds[i]?.coherence ?? null,
      achievedDb: ratioDb(bandPower(d.frequencies, d.psd, b.lowHz, b.highHz), bandPower(c.frequencies, c.psd, b.lowHz, b.highHz)),
      survivedDb:
        e === null || !(truthPower[i]! > 1e-6 * strongest) ? null : ratioDb(truthPower[i]!, bandPower(e.frequencies, e.psd, b.lowHz, b.highHz)),
    }));
  }
}
