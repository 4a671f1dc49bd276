import FFT from 'fft.js';
import { LuDecomposition, Matrix } from 'ml-matrix';

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
 * The multiple coherence of each of M measurements with K references over strided,
 * non-overlapping Welch segments (as replay's spectra): gamma^2(f) = Sxy^H Sxx^-1 Sxy / Syy, Sxx
 * the references' K x K cross-spectral matrix and Sxy their cross-spectra with the measurement
 * (Bendat & Piersol, Random Data, 4th ed., multiple-input systems, chapter 7). 1 - gamma^2 is the
 * smallest share of the measurement's power at f that linear filters of all K references
 * together can leave, so it bounds a multiple-input canceller as the ordinary coherence bounds a
 * one-reference one; with one reference it is the ordinary coherence. The references' transforms
 * and Sxx are formed once per segment for all the measurements.
 */
export class WelchMultiCross {
  private readonly fft: FFT;
  private readonly window: Float64Array;
  private readonly windowPower: number;
  private readonly K: number;
  private readonly M: number;
  /** Segment samples and spectra: the K references, then the M measurements. */
  private readonly seg: Float64Array[];
  private readonly spec: Float64Array[];
  private readonly frame: Float64Array;
  /** Per bin: Sxx (K x K, row-major, re and im apart); per measurement and bin: Sxy (K), Syy. */
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
    measurements = 1,
  ) {
    if (!(stride >= 2)) throw new RangeError(`stride ${stride}: the multiple-coherence estimate takes segments that do not overlap (2 or more)`);
    const N = segmentLength;
    const K = (this.K = references);
    const M = (this.M = measurements);
    this.fft = new FFT(N);
    ({ window: this.window, power: this.windowPower } = periodicHann(N));
    this.seg = Array.from({ length: K + M }, () => new Float64Array(N));
    this.spec = Array.from({ length: K + M }, () => new Float64Array(2 * N));
    this.frame = new Float64Array(N);
    const bins = N / 2 + 1;
    this.sxxRe = new Float64Array(bins * K * K);
    this.sxxIm = new Float64Array(bins * K * K);
    this.sxyRe = new Float64Array(M * bins * K);
    this.sxyIm = new Float64Array(M * bins * K);
    this.syy = new Float64Array(M * bins);
  }

  /** Appends n samples of every reference and every measurement (non-finite samples count as 0). */
  push(xs: readonly Float64Array[], ys: readonly Float64Array[], n: number): void {
    const { K, M, seg } = this;
    const N = this.segmentLength;
    const period = (this.stride * N) / 2;
    for (let i = 0; i < n; i++) {
      if (this.fill < N) {
        for (let k = 0; k < K + M; k++) {
          const a = (k < K ? xs[k]! : ys[k - K]!)[i]!;
          seg[k]![this.fill] = a - a === 0 ? a : 0; // non-finite: 0
        }
        if (this.fill === N - 1) this.accumulate();
      }
      if (++this.fill === period) this.fill = 0;
    }
  }

  private accumulate(): void {
    const { K, M, spec } = this;
    const N = this.segmentLength;
    for (let k = 0; k < K + M; k++) {
      const seg = this.seg[k]!;
      for (let i = 0; i < N; i++) this.frame[i] = seg[i]! * this.window[i]!;
      this.fft.realTransform(spec[k]!, this.frame);
    }
    const bins = N / 2 + 1;
    for (let f = 0; f < bins; f++) {
      for (let a = 0; a < K; a++) {
        const ar = spec[a]![2 * f]!;
        const ai = spec[a]![2 * f + 1]!;
        // conj(Xa) Xb
        for (let b = 0; b < K; b++) {
          const br = spec[b]![2 * f]!;
          const bi = spec[b]![2 * f + 1]!;
          this.sxxRe[(f * K + a) * K + b]! += ar * br + ai * bi;
          this.sxxIm[(f * K + a) * K + b]! += ar * bi - ai * br;
        }
        // conj(Xa) Y, for every measurement
        for (let m = 0; m < M; m++) {
          const yr = spec[K + m]![2 * f]!;
          const yi = spec[K + m]![2 * f + 1]!;
          this.sxyRe[(m * bins + f) * K + a]! += ar * yr + ai * yi;
          this.sxyIm[(m * bins + f) * K + a]! += ar * yi - ai * yr;
        }
      }
      for (let m = 0; m < M; m++) {
        const yr = spec[K + m]![2 * f]!;
        const yi = spec[K + m]![2 * f + 1]!;
        this.syy[m * bins + f]! += yr * yr + yi * yi;
      }
    }
    this.segments++;
  }

  /** As WelchCross.result, for measurement m: frequencies, Syy, the multiple coherence per bin, the first reference's PSD. */
  result(m = 0): { frequencies: Float64Array; syy: Float64Array; coherence: Float64Array; psdX: Float64Array } {
    const { K } = this;
    const bins = this.segmentLength / 2 + 1;
    const first = new Float64Array(bins);
    for (let f = 0; f < bins; f++) first[f] = this.sxxRe[f * K * K]!;
    const { frequencies, psd: psdX } = oneSided(first, this.segmentLength, this.sampleRate, this.windowPower, this.segments);
    const syy = this.syy.slice(m * bins, (m + 1) * bins);
    const coherence = new Float64Array(bins);
    for (let f = 0; f < bins; f++) {
      if (!(syy[f]! > 0)) continue;
      // Sxx z = Sxy as the real system [[Re, -Im], [Im, Re]] [Re z; Im z] = [Re Sxy; Im Sxy].
      const A = new Matrix(2 * K, 2 * K);
      const b = new Matrix(2 * K, 1);
      for (let i = 0; i < K; i++) {
        for (let j = 0; j < K; j++) {
          const re = this.sxxRe[(f * K + i) * K + j]!;
          const im = this.sxxIm[(f * K + i) * K + j]!;
          A.set(i, j, re);
          A.set(i, K + j, -im);
          A.set(K + i, j, im);
          A.set(K + i, K + j, re);
        }
        b.set(i, 0, this.sxyRe[(m * bins + f) * K + i]!);
        b.set(K + i, 0, this.sxyIm[(m * bins + f) * K + i]!);
      }
      // A singular Sxx (a bin no reference excites) explains nothing.
      const lu = new LuDecomposition(A);
      if (lu.isSingular()) continue;
      const z = lu.solve(b);
      // Sxy^H z, real for a Hermitian positive definite Sxx.
      let num = 0;
      for (let i = 0; i < K; i++) num += b.get(i, 0) * z.get(i, 0) + b.get(K + i, 0) * z.get(K + i, 0);
      coherence[f] = num > 0 ? Math.min(1, num / syy[f]!) : 0;
    }
    return { frequencies, syy, coherence, psdX };
  }
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
