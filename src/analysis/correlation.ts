import FFT from 'fft.js';
import { EigenvalueDecomposition, Matrix } from 'ml-matrix';

/**
 * Autocorrelation of a reference and the largest eigenvalue of its L x L Toeplitz matrix R, for
 * the LMS step bounds (Haykin, Adaptive Filter Theory, 4th ed., ch. 5). Estimates are biased:
 * r[k] = (1/N) sum_n x[n] x[n-k], which keeps R positive semi-definite.
 */

/** Biased autocorrelation r[k] = (1/N) sum x[n] x[n-k], k = 0..lags-1, directly (O(N lags)). */
export function autocorrelation(x: ArrayLike<number>, lags: number): Float64Array {
  const r = new Float64Array(lags);
  const n = x.length;
  for (let k = 0; k < lags && k < n; k++) {
    let s = 0;
    for (let i = k; i < n; i++) s += x[i]! * x[i - k]!;
    r[k] = s / n;
  }
  return r;
}

function pow2AtLeast(n: number): number {
  let m = 2;
  while (m < n) m *= 2;
  return m;
}

/** The same estimate by FFT (O(N log N)): for long recordings and long filters. */
export function autocorrelationFft(x: ArrayLike<number>, lags: number): Float64Array {
  const n = x.length;
  const size = pow2AtLeast(n + lags);
  const fft = new FFT(size);
  const input = new Float64Array(size);
  for (let i = 0; i < n; i++) input[i] = x[i]!;
  const spec = fft.createComplexArray() as number[];
  fft.realTransform(spec, input);
  fft.completeSpectrum(spec);
  for (let k = 0; k < size; k++) {
    const p = spec[2 * k]! ** 2 + spec[2 * k + 1]! ** 2;
    spec[2 * k] = p;
    spec[2 * k + 1] = 0;
  }
  const out = fft.createComplexArray() as number[];
  fft.inverseTransform(out, spec);
  const r = new Float64Array(lags);
  for (let k = 0; k < lags && k < n; k++) r[k] = out[2 * k]! / n;
  return r;
}

/** y = R v for the symmetric Toeplitz matrix with first row r (direct, O(L^2)). */
export function toeplitzTimes(r: Float64Array, v: Float64Array, y: Float64Array): void {
  const L = r.length;
  for (let i = 0; i < L; i++) {
    let s = 0;
    for (let j = 0; j < L; j++) s += r[i > j ? i - j : j - i]! * v[j]!;
    y[i] = s;
  }
}

/** R v through a 2L-point circulant embedding of the Toeplitz matrix (O(L log L)). */
class ToeplitzProduct {
  private readonly fft: FFT;
  private readonly size: number;
  private readonly c: number[];
  private readonly buf: Float64Array;
  private readonly spec: number[];
  private readonly out: number[];

  constructor(private readonly r: Float64Array) {
    const L = r.length;
    this.size = pow2AtLeast(2 * L);
    this.fft = new FFT(this.size);
    const col = new Float64Array(this.size);
    for (let k = 0; k < L; k++) col[k] = r[k]!;
    for (let k = 1; k < L; k++) col[this.size - k] = r[k]!;
    this.c = this.fft.createComplexArray() as number[];
    this.fft.realTransform(this.c, col);
    this.fft.completeSpectrum(this.c);
    this.buf = new Float64Array(this.size);
    this.spec = this.fft.createComplexArray() as number[];
    this.out = this.fft.createComplexArray() as number[];
  }

  times(v: Float64Array, y: Float64Array): void {
    const L = this.r.length;
    if (L <= 64) return toeplitzTimes(this.r, v, y);
    this.buf.fill(0);
    this.buf.set(v);
    this.fft.realTransform(this.spec, this.buf);
    this.fft.completeSpectrum(this.spec);
    const s = this.spec;
    const c = this.c;
    for (let k = 0; k < this.size; k++) {
      const re = s[2 * k]! * c[2 * k]! - s[2 * k + 1]! * c[2 * k + 1]!;
      const im = s[2 * k]! * c[2 * k + 1]! + s[2 * k + 1]! * c[2 * k]!;
      s[2 * k] = re;
      s[2 * k + 1] = im;
    }
    this.fft.inverseTransform(this.out, s);
    for (let i = 0; i < L; i++) y[i] = this.out[2 * i]!;
  }
}

/**
 * The largest eigenvalue of the symmetric Toeplitz matrix with first row r, by the Lanczos
 * method with full reorthogonalization (Golub & Van Loan, Matrix Computations, ch. 10): the
 * largest Ritz value of the tridiagonal projection, iterated until its residual bound
 * |beta_m s_m| falls below `tolerance` times the value. Power iteration converges only as fast
 * as lambda_2 / lambda_max, which for a band-limited reference is close to 1.
 */
export function toeplitzLambdaMax(r: Float64Array, tolerance = 1e-9, maxIterations = 200): number {
  const L = r.length;
  if (r[0]! <= 0) return 0;
  const R = new ToeplitzProduct(r);
  const m = Math.min(L, maxIterations);
  const V: Float64Array[] = [];
  const alpha: number[] = [];
  const beta: number[] = [];
  // A start with every frequency in it (an impulse plus a constant), normalized.
  let v = new Float64Array(L).fill(1 / Math.sqrt(L));
  v[0]! += 1;
  normalize(v);
  const w = new Float64Array(L);
  let lambda = 0;
  for (let j = 0; j < m; j++) {
    V.push(v);
    R.times(v, w);
    const a = dot(w, v);
    alpha.push(a);
    for (const u of V) axpy(-dot(w, u), u, w); // full reorthogonalization (twice is enough)
    for (const u of V) axpy(-dot(w, u), u, w);
    const b = Math.sqrt(dot(w, w));
    const { value, lastComponent } = largestRitz(alpha, beta);
    lambda = value;
    if (Math.abs(b * lastComponent) <= tolerance * Math.abs(value) || b <= tolerance * Math.abs(value) || j === L - 1) break;
    beta.push(b);
    v = Float64Array.from(w, (x) => x / b);
  }
  return lambda;
}

function dot(a: Float64Array, b: Float64Array): number {
  let s = 0;
  for (let i = 0; i < a.length; i++) s += a[i]! * b[i]!;
  return s;
}

function axpy(a: number, x: Float64Array, y: Float64Array): void {
  for (let i = 0; i < y.length; i++) y[i]! += a * x[i]!;
}

function normalize(v: Float64Array): void {
  const n = Math.sqrt(dot(v, v));
  for (let i = 0; i < v.length; i++) v[i]! /= n;
}

/** The largest eigenvalue of the tridiagonal (alpha, beta) and the last component of its unit eigenvector. */
function largestRitz(alpha: number[], beta: number[]): { value: number; lastComponent: number } {
  const m = alpha.length;
  const T = Matrix.zeros(m, m);
  for (let i = 0; i < m; i++) {
    T.set(i, i, alpha[i]!);
    if (i + 1 < m) {
      T.set(i, i + 1, beta[i]!);
      T.set(i + 1, i, beta[i]!);
    }
  }
  const evd = new EigenvalueDecomposition(T, { assumeSymmetric: true });
  const values = evd.realEigenvalues;
  let best = 0;
  for (let i = 1; i < m; i++) if (values[i]! > values[best]!) best = i;
  return { value: values[best]!, lastComponent: evd.eigenvectorMatrix.get(m - 1, best) };
}

/** Correlation estimates of a reference x and a desired d, over the samples kept. */
export interface Correlations {
  /** r[k] = (1/n) sum x[i] x[i-k], biased, k = 0..L-1. */
  readonly r: Float64Array;
  /** p[k] = (1/n) sum d[i] x[i-k], biased. */
  readonly p: Float64Array;
  /** (1/n) sum d[i]^2. */
  readonly pd: number;
  /** Samples i the sums ran over. */
  readonly n: number;
}

/**
 * Accumulates r and p over a stream, over only the samples it is told to keep (x[i-k] may reach
 * into samples that were not kept: the reference there is still the reference). Kept stretches
 * are correlated in chunks by FFT, so the cost is O(log) per sample per lag set, not O(L).
 */
export class CorrelationAccumulator {
  private readonly L: number;
  private readonly chunk: number;
  private readonly fft: FFT;
  private readonly size: number;
  /** The last L-1 reference samples seen, a ring whose oldest sample is at hpos. */
  private readonly history: Float64Array;
  private hpos = 0;
  /** The staged kept stretch: its L-1 preceding reference samples, then its samples. */
  private readonly sx: Float64Array;
  private readonly sd: Float64Array;
  private staged = 0;
  private readonly r: Float64Array;
  private readonly p: Float64Array;
  private pd = 0;
  private n = 0;
  private readonly a: Float64Array;
  private readonly bufA: number[];
  private readonly bufB: number[];
  private readonly bufC: number[];
  private readonly out: number[];

  constructor(taps: number, chunk = 8192) {
    this.L = taps;
    this.chunk = chunk;
    this.size = pow2AtLeast(chunk + taps);
    this.fft = new FFT(this.size);
    this.history = new Float64Array(Math.max(0, taps - 1));
    this.sx = new Float64Array(taps - 1 + chunk);
    this.sd = new Float64Array(chunk);
    this.r = new Float64Array(taps);
    this.p = new Float64Array(taps);
    this.a = new Float64Array(this.size);
    this.bufA = this.fft.createComplexArray() as number[];
    this.bufB = this.fft.createComplexArray() as number[];
    this.bufC = this.fft.createComplexArray() as number[];
    this.out = this.fft.createComplexArray() as number[];
  }

  /** Feeds n samples; `keep` says whether they count in the sums. */
  push(x: ArrayLike<number>, d: ArrayLike<number>, n: number, keep: boolean): void {
    const H = this.L - 1;
    for (let i = 0; i < n; i++) {
      if (keep) {
        if (this.staged === 0) for (let j = 0; j < H; j++) this.sx[j] = this.history[(this.hpos + j) % H]!;
        this.sx[H + this.staged] = x[i]!;
        this.sd[this.staged] = d[i]!;
        this.pd += d[i]! * d[i]!;
        if (++this.staged === this.chunk) this.flush();
      } else if (this.staged > 0) this.flush();
      if (H > 0) {
        this.history[this.hpos] = x[i]!;
        this.hpos = this.hpos + 1 === H ? 0 : this.hpos + 1;
      }
    }
  }

  /** Correlates the staged stretch: r[k] += sum_j u[j] s[j + H - k], p likewise with d. */
  private flush(): void {
    const B = this.staged;
    if (B === 0) return;
    const H = this.L - 1;
    const { fft, a, bufA, bufB, bufC, out } = this;
    // S = FFT(s), s = sx[0 .. H + B)
    a.fill(0);
    a.set(this.sx.subarray(0, H + B));
    fft.realTransform(bufA, a);
    fft.completeSpectrum(bufA);
    for (const [src, acc] of [
      [this.sx.subarray(H, H + B), this.r],
      [this.sd.subarray(0, B), this.p],
    ] as const) {
      a.fill(0);
      a.set(src);
      fft.realTransform(bufB, a);
      fft.completeSpectrum(bufB);
      // c[m] = sum_j u[j] s[j + m] = IFFT(conj(U) S)[m]
      for (let k = 0; k < this.size; k++) {
        const ur = bufB[2 * k]!;
        const ui = -bufB[2 * k + 1]!;
        const sr = bufA[2 * k]!;
        const si = bufA[2 * k + 1]!;
        bufC[2 * k] = ur * sr - ui * si;
        bufC[2 * k + 1] = ur * si + ui * sr;
      }
      fft.inverseTransform(out, bufC);
      for (let k = 0; k < this.L; k++) acc[k]! += out[2 * (H - k)]!;
    }
    this.n += B;
    this.staged = 0;
  }

  result(): Correlations {
    this.flush();
    const n = Math.max(1, this.n);
    return { r: this.r.map((v) => v / n), p: this.p.map((v) => v / n), pd: this.pd / n, n: this.n };
  }
}

/**
 * The exact sample covariance of one stretch (the covariance method): C[j][k] = sum over the
 * stretch's n samples i of x[i-j] x[i-k], divided by n, with p[k] = sum d[i] x[i-k] / n and
 * pd = sum d[i]^2 / n. `x` holds L-1 samples of history, then the stretch; `d` the stretch. With
 * it, pd - 2 w'p + w'Cw is exactly the error power of the FIR w over the stretch, which the
 * Toeplitz estimate only approximates to O(L/n).
 */
export function stretchCovariance(x: Float64Array, d: Float64Array, L: number): { C: Float64Array[]; p: Float64Array; pd: number } {
  const H = L - 1;
  const n = d.length;
  const C = Array.from({ length: L }, () => new Float64Array(L));
  const p = new Float64Array(L);
  let pd = 0;
  for (let i = 0; i < n; i++) {
    const t = H + i;
    pd += d[i]! * d[i]!;
    for (let k = 0; k < L; k++) {
      C[0]![k]! += x[t]! * x[t - k]!;
      p[k]! += d[i]! * x[t - k]!;
    }
  }
  // C[j+1][k+1] = C[j][k] + x[H-1-j] x[H-1-k] - x[H+n-1-j] x[H+n-1-k]: the stretch shifted by one.
  for (let j = 0; j + 1 < L; j++) {
    for (let k = j; k + 1 < L; k++) C[j + 1]![k + 1] = C[j]![k]! + x[H - 1 - j]! * x[H - 1 - k]! - x[H + n - 1 - j]! * x[H + n - 1 - k]!;
  }
  for (let j = 0; j < L; j++) for (let k = 0; k < j; k++) C[j]![k] = C[k]![j]!;
  for (let j = 0; j < L; j++) {
    for (let k = 0; k < L; k++) C[j]![k]! /= n;
    p[j]! /= n;
  }
  return { C, p, pd: pd / n };
}
