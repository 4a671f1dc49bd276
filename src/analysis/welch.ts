import FFT from 'fft.js';

/** Segments replay's spectra average at least, where the recording holds that many. */
export const REPLAY_SPECTRUM_SEGMENTS = 128;

/**
 * The stride of replay's spectra (its coherence bound, bands and report) over a recording of
 * `frames`: every k-th of Welch's half-overlapping segments, k from 2 (segments that do not
 * overlap) to 16, as large as leaves REPLAY_SPECTRUM_SEGMENTS of them. A long recording's
 * spectra cost a sliver of its replay; a short one's average every segment it has.
 */
export function replaySpectrumStride(frames: number, segment: number): number {
  return Math.max(2, Math.min(16, Math.floor((2 * frames) / segment / REPLAY_SPECTRUM_SEGMENTS)));
}

/** A Welch segment for a rate: about 1/8 s, a power of two from 256 to 8192 samples. */
export function spectrumSegment(rate: number): number {
  return Math.min(8192, Math.max(256, 2 ** Math.ceil(Math.log2(rate / 8))));
}

/** The periodic Hann window of length N (what scipy's get_window('hann', N) gives) and its power sum. */
function periodicHann(N: number): { window: Float64Array; power: number } {
  const window = Float64Array.from({ length: N }, (_, i) => 0.5 - 0.5 * Math.cos((2 * Math.PI * i) / N));
  return { window, power: window.reduce((a, w) => a + w * w, 0) };
}

/** Bin frequencies of an N-point transform, and summed |X|^2 scaled to a one-sided PSD (full scale^2 / Hz). */
function oneSided(sum: Float64Array, N: number, rate: number, windowPower: number, segments: number): { frequencies: Float64Array; psd: Float64Array } {
  const bins = N / 2 + 1;
  const frequencies = Float64Array.from({ length: bins }, (_, k) => (k * rate) / N);
  const psd = new Float64Array(bins);
  if (segments === 0) return { frequencies, psd };
  const scale = 1 / (rate * windowPower * segments);
  for (let k = 0; k < bins; k++) psd[k] = sum[k]! * scale * (k === 0 || k === N / 2 ? 1 : 2);
  return { frequencies, psd };
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

  /** stride k: average every k-th of the half-overlapping segments (2: segments that do not overlap). */
  constructor(
    readonly segmentLength: number,
    readonly sampleRate: number,
    private readonly stride = 1,
  ) {
    this.fft = new FFT(segmentLength);
    ({ window: this.window, power: this.windowPower } = periodicHann(segmentLength));
    this.segment = new Float64Array(segmentLength);
    this.frame = new Float64Array(segmentLength);
    this.spectrum = new Float64Array(2 * segmentLength);
    this.sum = new Float64Array(segmentLength / 2 + 1);
  }

  push(x: Float64Array, n: number = x.length): void {
    const N = this.segmentLength;
    if (this.stride > 1) {
      // Strided segments do not overlap: a sample is kept only where a used segment lies.
      const period = (this.stride * N) / 2;
      for (let i = 0; i < n; i++) {
        if (this.fill < N) {
          const v = x[i]!;
          this.segment[this.fill] = v - v === 0 ? v : 0; // non-finite: 0
          if (this.fill === N - 1) this.accumulate();
        }
        if (++this.fill === period) this.fill = 0;
      }
      return;
    }
    for (let i = 0; i < n; i++) {
      const v = x[i]!;
      this.segment[this.fill++] = v - v === 0 ? v : 0; // non-finite: 0
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
    return oneSided(this.sum, this.segmentLength, this.sampleRate, this.windowPower, this.segments);
  }
}

/**
 * Welch estimates of two signals' auto- and cross-spectra over the same segments as WelchPsd
 * (periodic Hann, 50 % overlap, no detrending), and their magnitude-squared coherence
 * C(f) = |Sxy|^2 / (Sxx Syy) (Bendat & Piersol, Random Data, 4th ed., section 5.2.5 and 9.2.3;
 * scipy.signal.coherence computes the same with detrend=False). 1 - C(f) is the smallest share of
 * the measurement's power at f that any linear time-invariant filter of the reference can leave,
 * so -10 log10(1 - C) bounds the cancellation there (Bendat & Piersol, section 6.1.4).
 */
export class WelchCross {
  private readonly fft: FFT;
  private readonly window: Float64Array;
  private readonly windowPower: number;
  private readonly segX: Float64Array;
  private readonly segY: Float64Array;
  private readonly frame: Float64Array;
  private readonly specX: Float64Array;
  private readonly specY: Float64Array;
  private readonly sxx: Float64Array;
  private readonly syy: Float64Array;
  private readonly sxyRe: Float64Array;
  private readonly sxyIm: Float64Array;
  private fill = 0;
  segments = 0;

  constructor(
    readonly segmentLength: number,
    readonly sampleRate: number,
  ) {
    const N = segmentLength;
    this.fft = new FFT(N);
    ({ window: this.window, power: this.windowPower } = periodicHann(N));
    this.segX = new Float64Array(N);
    this.segY = new Float64Array(N);
    this.frame = new Float64Array(N);
    this.specX = new Float64Array(2 * N);
    this.specY = new Float64Array(2 * N);
    const bins = N / 2 + 1;
    this.sxx = new Float64Array(bins);
    this.syy = new Float64Array(bins);
    this.sxyRe = new Float64Array(bins);
    this.sxyIm = new Float64Array(bins);
  }

  /** Appends n samples of both signals (non-finite samples count as 0). */
  push(x: Float64Array, y: Float64Array, n: number): void {
    const N = this.segmentLength;
    for (let i = 0; i < n; i++) {
      const a = x[i]!;
      const b = y[i]!;
      this.segX[this.fill] = a - a === 0 ? a : 0; // non-finite: 0
      this.segY[this.fill++] = b - b === 0 ? b : 0;
      if (this.fill === N) {
        this.accumulate();
        this.segX.copyWithin(0, N / 2);
        this.segY.copyWithin(0, N / 2);
        this.fill = N / 2;
      }
    }
  }

  private accumulate(): void {
    const N = this.segmentLength;
    for (let i = 0; i < N; i++) this.frame[i] = this.segX[i]! * this.window[i]!;
    this.fft.realTransform(this.specX, this.frame);
    for (let i = 0; i < N; i++) this.frame[i] = this.segY[i]! * this.window[i]!;
    this.fft.realTransform(this.specY, this.frame);
    for (let k = 0; k <= N / 2; k++) {
      const xr = this.specX[2 * k]!;
      const xi = this.specX[2 * k + 1]!;
      const yr = this.specY[2 * k]!;
      const yi = this.specY[2 * k + 1]!;
      this.sxx[k]! += xr * xr + xi * xi;
      this.syy[k]! += yr * yr + yi * yi;
      // conj(X) Y
      this.sxyRe[k]! += xr * yr + xi * yi;
      this.sxyIm[k]! += xr * yi - xi * yr;
    }
    this.segments++;
  }

  /**
   * Frequencies (Hz), the measurement's spectrum Syy (relative units), the coherence per bin, and
   * the reference's one-sided PSD (full scale^2 / Hz, as WelchPsd gives it).
   */
  result(): { frequencies: Float64Array; syy: Float64Array; coherence: Float64Array; psdX: Float64Array } {
    const { frequencies, psd: psdX } = oneSided(this.sxx, this.segmentLength, this.sampleRate, this.windowPower, this.segments);
    const bins = frequencies.length;
    const coherence = new Float64Array(bins);
    for (let k = 0; k < bins; k++) {
      const den = this.sxx[k]! * this.syy[k]!;
      coherence[k] = den > 0 ? Math.min(1, (this.sxyRe[k]! ** 2 + this.sxyIm[k]! ** 2) / den) : 0;
    }
    return { frequencies, syy: Float64Array.from(this.syy), coherence, psdX };
  }
}

/**
 * The multiple coherence of a measurement with K references over strided, non-overlapping Welch
 * segments (as replay's spectra): gamma^2(f) = Sxy^H Sxx^-1 Sxy / Syy, Sxx the references' K x K
 * cross-spectral matrix and Sxy their cross-spectra with the measurement (Bendat & Piersol,
 * Random Data, 4th ed., multiple-input systems, chapter 7). 1 - gamma^2 is the smallest share of
 * the measurement's power at f that linear filters of all K references together can leave, so it
 * bounds a multiple-input canceller as the ordinary coherence bounds a one-reference one; with
 * one reference it is the ordinary coherence.
 */
export class WelchMultiCross {
  private readonly fft: FFT;
  private readonly window: Float64Array;
  private readonly windowPower: number;
  private readonly K: number;
  private readonly segX: Float64Array[];
  private readonly segY: Float64Array;
  private readonly frame: Float64Array;
  private readonly specX: Float64Array[];
  private readonly specY: Float64Array;
  /** Per bin: Sxx (K x K, row-major, re and im apart), Sxy (K), Syy. */
  private readonly sxxRe: Float64Array;
  private readonly sxxIm: Float64Array;
  private readonly sxyRe: Float64Array;
  private readonly sxyIm: Float64Array;
  private readonly syy: Float64Array;
  private fill = 0;
  segments = 0;

  /** stride: at least 2 (the used segments do not overlap), as replaySpectrumStride gives. */
  constructor(
    readonly segmentLength: number,
    readonly sampleRate: number,
    private readonly stride: number,
    references: number,
  ) {
    if (!(stride >= 2)) throw new RangeError(`stride ${stride}: the multiple-coherence estimate takes segments that do not overlap (2 or more)`);
    const N = segmentLength;
    const K = (this.K = references);
    this.fft = new FFT(N);
    ({ window: this.window, power: this.windowPower } = periodicHann(N));
    this.segX = Array.from({ length: K }, () => new Float64Array(N));
    this.segY = new Float64Array(N);
    this.frame = new Float64Array(N);
    this.specX = Array.from({ length: K }, () => new Float64Array(2 * N));
    this.specY = new Float64Array(2 * N);
    const bins = N / 2 + 1;
    this.sxxRe = new Float64Array(bins * K * K);
    this.sxxIm = new Float64Array(bins * K * K);
    this.sxyRe = new Float64Array(bins * K);
    this.sxyIm = new Float64Array(bins * K);
    this.syy = new Float64Array(bins);
  }

  /** Appends n samples of every reference and the measurement (non-finite samples count as 0). */
  push(xs: readonly Float64Array[], y: Float64Array, n: number): void {
    const N = this.segmentLength;
    const period = (this.stride * N) / 2;
    for (let i = 0; i < n; i++) {
      if (this.fill < N) {
        for (let k = 0; k < this.K; k++) {
          const a = xs[k]![i]!;
          this.segX[k]![this.fill] = a - a === 0 ? a : 0; // non-finite: 0
        }
        const b = y[i]!;
        this.segY[this.fill] = b - b === 0 ? b : 0;
        if (this.fill === N - 1) this.accumulate();
      }
      if (++this.fill === period) this.fill = 0;
    }
  }

  private transform(seg: Float64Array, spec: Float64Array): void {
    for (let i = 0; i < this.segmentLength; i++) this.frame[i] = seg[i]! * this.window[i]!;
    this.fft.realTransform(spec, this.frame);
  }

  private accumulate(): void {
    const { K } = this;
    for (let k = 0; k < K; k++) this.transform(this.segX[k]!, this.specX[k]!);
    this.transform(this.segY, this.specY);
    const bins = this.segmentLength / 2 + 1;
    for (let f = 0; f < bins; f++) {
      const yr = this.specY[2 * f]!;
      const yi = this.specY[2 * f + 1]!;
      this.syy[f]! += yr * yr + yi * yi;
      for (let a = 0; a < K; a++) {
        const ar = this.specX[a]![2 * f]!;
        const ai = this.specX[a]![2 * f + 1]!;
        // conj(Xa) Y and conj(Xa) Xb
        this.sxyRe[f * K + a]! += ar * yr + ai * yi;
        this.sxyIm[f * K + a]! += ar * yi - ai * yr;
        for (let b = 0; b < K; b++) {
          const br = this.specX[b]![2 * f]!;
          const bi = this.specX[b]![2 * f + 1]!;
          this.sxxRe[(f * K + a) * K + b]! += ar * br + ai * bi;
          this.sxxIm[(f * K + a) * K + b]! += ar * bi - ai * br;
        }
      }
    }
    this.segments++;
  }

  /** As WelchCross.result: frequencies, Syy, the multiple coherence per bin, the first reference's PSD. */
  result(): { frequencies: Float64Array; syy: Float64Array; coherence: Float64Array; psdX: Float64Array } {
    const { K } = this;
    const bins = this.segmentLength / 2 + 1;
    const first = new Float64Array(bins);
    for (let f = 0; f < bins; f++) first[f] = this.sxxRe[f * K * K]!;
    const { frequencies, psd: psdX } = oneSided(first, this.segmentLength, this.sampleRate, this.windowPower, this.segments);
    const coherence = new Float64Array(bins);
    const mRe = new Float64Array(K * (K + 1));
    const mIm = new Float64Array(K * (K + 1));
    for (let f = 0; f < bins; f++) {
      // The augmented system [Sxx | Sxy], solved by Gaussian elimination with partial pivoting.
      for (let a = 0; a < K; a++) {
        for (let b = 0; b < K; b++) {
          mRe[a * (K + 1) + b] = this.sxxRe[(f * K + a) * K + b]!;
          mIm[a * (K + 1) + b] = this.sxxIm[(f * K + a) * K + b]!;
        }
        mRe[a * (K + 1) + K] = this.sxyRe[f * K + a]!;
        mIm[a * (K + 1) + K] = this.sxyIm[f * K + a]!;
      }
      const z = solveComplex(mRe, mIm, K);
      if (z === null || !(this.syy[f]! > 0)) continue;
      // Sxy^H z, real for a Hermitian positive definite Sxx.
      let num = 0;
      for (let a = 0; a < K; a++) num += this.sxyRe[f * K + a]! * z.re[a]! + this.sxyIm[f * K + a]! * z.im[a]!;
      coherence[f] = Math.max(0, Math.min(1, num / this.syy[f]!));
    }
    return { frequencies, syy: Float64Array.from(this.syy), coherence, psdX };
  }
}

/** Solves the K x K complex system held as [A | b] (row-major, K + 1 columns); null when singular. */
function solveComplex(re: Float64Array, im: Float64Array, K: number): { re: Float64Array; im: Float64Array } | null {
  const W = K + 1;
  let scale = 0;
  for (let a = 0; a < K; a++) scale = Math.max(scale, Math.hypot(re[a * W + a]!, im[a * W + a]!));
  if (!(scale > 0)) return null;
  for (let c = 0; c < K; c++) {
    let p = c;
    for (let r = c + 1; r < K; r++) if (Math.hypot(re[r * W + c]!, im[r * W + c]!) > Math.hypot(re[p * W + c]!, im[p * W + c]!)) p = r;
    const pr = re[p * W + c]!;
    const pi = im[p * W + c]!;
    const mag = pr * pr + pi * pi;
    if (!(Math.sqrt(mag) > 1e-12 * scale)) return null;
    if (p !== c) {
      for (let j = 0; j < W; j++) {
        [re[c * W + j], re[p * W + j]] = [re[p * W + j]!, re[c * W + j]!];
        [im[c * W + j], im[p * W + j]] = [im[p * W + j]!, im[c * W + j]!];
      }
    }
    for (let r = c + 1; r < K; r++) {
      // factor = M[r][c] / M[c][c]
      const fr = (re[r * W + c]! * pr + im[r * W + c]! * pi) / mag;
      const fi = (im[r * W + c]! * pr - re[r * W + c]! * pi) / mag;
      for (let j = c; j < W; j++) {
        re[r * W + j] = re[r * W + j]! - (fr * re[c * W + j]! - fi * im[c * W + j]!);
        im[r * W + j] = im[r * W + j]! - (fr * im[c * W + j]! + fi * re[c * W + j]!);
      }
    }
  }
  const zr = new Float64Array(K);
  const zi = new Float64Array(K);
  for (let c = K - 1; c >= 0; c--) {
    let sr = re[c * W + K]!;
    let si = im[c * W + K]!;
    for (let j = c + 1; j < K; j++) {
      sr -= re[c * W + j]! * zr[j]! - im[c * W + j]! * zi[j]!;
      si -= re[c * W + j]! * zi[j]! + im[c * W + j]! * zr[j]!;
    }
    const dr = re[c * W + c]!;
    const di = im[c * W + c]!;
    const mag = dr * dr + di * di;
    zr[c] = (sr * dr + si * di) / mag;
    zi[c] = (si * dr - sr * di) / mag;
  }
  return { re: zr, im: zi };
}

/** Octave bands below Nyquist: centres 1 kHz x 2^k from 31.25 Hz (base 2; ISO 266 rounds the nominal 31.5). */
export function octaveBands(sampleRate: number): { centreHz: number; lowHz: number; highHz: number }[] {
  const out = [];
  for (let c = 31.25; c * Math.SQRT2 <= sampleRate / 2; c *= 2) out.push({ centreHz: c, lowHz: c / Math.SQRT2, highHz: c * Math.SQRT2 });
  return out;
}

/** Bound on the cancellation a linear filter can reach in a band: -10 log10(sum Syy (1 - C) / sum Syy). */
export function bandBounds(r: ReturnType<WelchCross['result'] | WelchMultiCross['result']>, sampleRate: number) {
  return octaveBands(sampleRate).map((b) => {
    let p = 0;
    let residual = 0;
    let coh = 0;
    for (let k = 0; k < r.frequencies.length; k++) {
      const f = r.frequencies[k]!;
      if (f < b.lowHz || f >= b.highHz) continue;
      p += r.syy[k]!;
      residual += r.syy[k]! * (1 - r.coherence[k]!);
      coh += r.syy[k]! * r.coherence[k]!;
    }
    return {
      ...b,
      coherence: p > 0 ? coh / p : null,
      boundDb: p > 0 ? Math.min(MAX_BOUND_DB, -10 * Math.log10(Math.max(residual / p, 10 ** (-MAX_BOUND_DB / 10)))) : null,
    };
  });
}

/** A coherence of 1 within rounding would bound nothing: report at most this. */
export const MAX_BOUND_DB = 100;
