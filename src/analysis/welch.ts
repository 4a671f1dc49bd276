import FFT from 'fft.js';

/** A Welch segment for a rate: about 1/8 s, a power of two from 256 to 8192 samples. */
export function spectrumSegment(rate: number): number {
  return Math.min(8192, Math.max(256, 2 ** Math.ceil(Math.log2(rate / 8))));
}

/**
 * Welch's averaged periodogram, accumulated as samples stream past: Hann-windowed segments with
 * 50 % overlap, one-sided, in full-scale^2 per hertz, so that integrating it over frequency gives
 * the signal's power (Welch, IEEE Trans. Audio Electroacoust. AU-15(2), 1967).
 */
export class WelchPsd {
  private readonly fft: FFT;
  private readonly window: Float64Array;
  private readonly windowPower: number;
  private readonly segment: Float64Array;
  private readonly frame: Float64Array;
  private readonly spectrum: Float64Array;
  private readonly sum: Float64Array;
  private fill = 0;
  segments = 0;

  constructor(
    readonly segmentLength: number,
    readonly sampleRate: number,
  ) {
    this.fft = new FFT(segmentLength);
    this.window = new Float64Array(segmentLength);
    let wp = 0;
    for (let i = 0; i < segmentLength; i++) {
      const w = 0.5 - 0.5 * Math.cos((2 * Math.PI * i) / segmentLength); // periodic Hann
      this.window[i] = w;
      wp += w * w;
    }
    this.windowPower = wp;
    this.segment = new Float64Array(segmentLength);
    this.frame = new Float64Array(segmentLength);
    this.spectrum = new Float64Array(2 * segmentLength);
    this.sum = new Float64Array(segmentLength / 2 + 1);
  }

  push(x: Float64Array, n: number = x.length): void {
    const N = this.segmentLength;
    for (let i = 0; i < n; i++) {
      const v = x[i]!;
      this.segment[this.fill++] = Number.isFinite(v) ? v : 0;
      if (this.fill === N) {
        this.accumulate();
        this.segment.copyWithin(0, N / 2);
        this.fill = N / 2;
      }
    }
  }

  private accumulate(): void {
    const N = this.segmentLength;
    for (let i = 0; i < N; i++) this.frame[i] = this.segment[i]! * this.window[i]!;
    this.fft.realTransform(this.spectrum, this.frame);
    for (let k = 0; k <= N / 2; k++) this.sum[k]! += this.spectrum[2 * k]! ** 2 + this.spectrum[2 * k + 1]! ** 2;
    this.segments++;
  }

  /** Frequencies (Hz) and the one-sided PSD (full scale^2 / Hz); empty before one segment. */
  result(): { frequencies: Float64Array; psd: Float64Array } {
    const N = this.segmentLength;
    const bins = N / 2 + 1;
    const frequencies = Float64Array.from({ length: bins }, (_, k) => (k * this.sampleRate) / N);
    const psd = new Float64Array(bins);
    if (this.segments === 0) return { frequencies, psd };
    const scale = 1 / (this.sampleRate * this.windowPower * this.segments);
    for (let k = 0; k < bins; k++) psd[k] = this.sum[k]! * scale * (k === 0 || k === N / 2 ? 1 : 2);
    return { frequencies, psd };
  }
}
